"""`seqlang.simulate`: the played timeline of a sequence, simulated.

>>> result = seqlang.simulate("programs/bell_pair.seq")     # doctest: +SKIP
>>> result.expectations[0]["fidelity"]                       # doctest: +SKIP
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ..lang.diagnostics import Diagnostic, warning
from . import noise, observables
from .clusters import clusters as find_clusters
from .model import Model, build_model, pair_interactions_hz
from .solve import Branch, density_matrix, drop_intermediate, propagate

OPTIONS = {"interactions_hz": None, "history": False, "ladder": False, "noise": "off", "shots": 200, "seed": 1}
# Outcomes rarer than this are not worth a conditioned report.
MIN_CONDITION_PROBABILITY = 1e-9


@dataclass(frozen=True)
class ClusterResult:
    """One independently simulated group of atoms."""

    model: Model
    branches: tuple[Branch, ...]
    history: tuple = ()
    shots: tuple = ()  # per-shot branches when quasi-static noise is sampled

    def density(self, condition: tuple[str, str, int] | None = None) -> np.ndarray:
        chosen = [b for b in self.branches if condition is None or condition in b.outcomes
                  or condition[1] not in self.model.sites]
        return density_matrix(chosen)


@dataclass(frozen=True)
class SimulationResult:
    """Final states per cluster and the numbers for every `expect`."""

    program_name: str
    clusters: tuple[ClusterResult, ...]
    expectations: tuple[dict, ...]
    records: dict
    interactions_hz: dict
    warnings: tuple[Diagnostic, ...] = field(default=())
    noise: dict = field(default_factory=dict)

    def reduced_density(self, sites: tuple[str, ...], condition=None) -> np.ndarray:
        """Density matrix (4 levels per atom) of `sites`, optionally given one imaging outcome."""
        return reduced_density(self.clusters, sites, condition)

    def final_state(self) -> dict[tuple[str, ...], np.ndarray]:
        """Density matrix of each cluster, averaged over imaging outcomes and shots (trace 1)."""
        return {c.model.sites: c.density() for c in self.clusters}


def reduced_density(clusters, sites, condition=None) -> np.ndarray:
    """Tensor product of the clusters' reduced states, reordered as `sites`."""
    parts, order = [], []
    for cluster in clusters:
        keep = [i for i, s in enumerate(cluster.model.sites) if s in sites]
        if not keep:
            continue
        rho = cluster.density(condition)
        parts.append(observables.partial_trace(rho, cluster.model.size, keep))
        order += [cluster.model.sites[i] for i in keep]
    rho = parts[0]
    for part in parts[1:]:
        rho = np.kron(rho, part)
    return _reorder(rho, order, list(sites))


def _reorder(rho: np.ndarray, have: list[str], want: list[str]) -> np.ndarray:
    n = len(have)
    perm = [have.index(s) for s in want]
    tensor = rho.reshape([4] * (2 * n)).transpose(perm + [p + n for p in perm])
    return tensor.reshape(rho.shape)


def simulate(source, **options) -> SimulationResult:
    """Simulate a sequence file path or a loaded :class:`seqlang.Sequence`."""
    unknown = set(options) - set(OPTIONS)
    if unknown:
        raise TypeError(f"unknown simulate option(s): {', '.join(sorted(unknown))}")
    options = {**OPTIONS, **options}
    from ..api import Sequence, load
    sequence = source if isinstance(source, Sequence) else load(str(source))
    program, timeline = sequence.program, sequence.played
    interactions = options["interactions_hz"]
    warnings = []
    if interactions is None:
        interactions = pair_interactions_hz(program, tuple(program.sites))
        warnings = _forster_warnings(program)
    sources = noise.parse_sources(options["noise"]) if isinstance(options["noise"], str) else tuple(options["noise"])
    rng = np.random.default_rng(options["seed"])
    results = [_simulate_cluster(program, timeline, group, interactions, options, sources, rng)
               for group in find_clusters(program, timeline, interactions)]
    expectations = tuple(_expectation(program, results, e) for e in program.expects)
    info = {"sources": list(sources), "shots": _shots(sources, options), "seed": options["seed"]}
    expectations = tuple(_with_errors(e, results, info["shots"]) for e in expectations)
    return SimulationResult(program.name, tuple(results), expectations, _records(results), interactions,
                            tuple(warnings), info)


def _shots(sources, options) -> int:
    return options["shots"] if any(s in noise.QUASI_STATIC for s in sources) else 1


def _simulate_cluster(program, timeline, group, interactions, options, sources, rng) -> "ClusterResult":
    model = build_model(program, timeline, group, interactions, ladder=options["ladder"])
    c_ops = noise.collapse_operators(program, model, sources)
    shots = _shots(sources, options)
    branches, history, per_shot = [], (), []
    for _ in range(shots):
        shot_model = noise.sample_model(program, model, sources, rng) if shots > 1 else model
        initial = noise.prepared_state(program, model, sources, rng)
        found, history = propagate(shot_model, c_ops, record_history=options["history"], initial=initial)
        found = drop_intermediate(model, found)
        per_shot.append(tuple(found))
        branches += [_scaled(b, shots) for b in found]
    return ClusterResult(replace(model, dim=4), tuple(branches), tuple(history), tuple(per_shot) if shots > 1 else ())


def _scaled(branch: Branch, shots: int) -> Branch:
    factor = 1 / np.sqrt(shots) if branch.state.ndim == 1 else 1 / shots
    return Branch(branch.outcomes, branch.state * factor)


def _with_errors(expectation: dict, clusters, shots: int) -> dict:
    """Add the Monte Carlo standard error of the fidelity and binomial error bars for `shots`."""
    out = dict(expectation)
    out["populations_error"] = {k: observables.clean(noise.binomial_error(v, shots))
                                for k, v in expectation["populations"].items()}
    inside = [c for c in clusters if set(expectation["sites"]) <= set(c.model.sites) and c.shots]
    if inside:
        values = [_shot_fidelity(inside[0], shot, expectation) for shot in inside[0].shots]
        out["fidelity_error"] = observables.clean(np.std(values, ddof=1) / np.sqrt(len(values)))
    return out


def _shot_fidelity(cluster, branches, expectation) -> float:
    single = ClusterResult(cluster.model, branches)
    rho = reduced_density([single], tuple(expectation["sites"]))
    state = expectation["state"]
    is_ket = state.startswith("|")
    return observables.summarize(rho, len(expectation["sites"]), state.strip("|>"), is_ket)["fidelity"]


def _expectation(program, clusters, expect) -> dict:
    rho = reduced_density(clusters, expect.sites)
    out = {"sites": list(expect.sites), "state": expect.state if not expect.is_ket else f"|{expect.state}>"}
    out.update(observables.summarize(rho, len(expect.sites), expect.state, expect.is_ket))
    out["conditioned"] = _conditioned(program, clusters, expect)
    return out


def _conditioned(program, clusters, expect) -> list[dict]:
    """The expected sites' numbers given each imaging outcome of another site."""
    out = []
    for cluster in clusters:
        labels = sorted({lab for b in cluster.branches for lab in b.outcomes if lab[1] not in expect.sites})
        for record, site, bit in labels:
            weight = sum(b.weight for b in cluster.branches if (record, site, bit) in b.outcomes)
            if weight < MIN_CONDITION_PROBABILITY:
                continue
            rho = reduced_density(clusters, expect.sites, (record, site, bit))
            rho = rho / np.trace(rho).real
            numbers = observables.summarize(rho, len(expect.sites), expect.state, expect.is_ket)
            out.append({"record": record, "site": site, "outcome": bit,
                        "probability": observables.clean(weight), **numbers})
    return out


def _records(clusters) -> dict:
    """Probability of a bright (|1⟩) outcome per record and site."""
    records: dict = {}
    for cluster in clusters:
        for b in cluster.branches:
            for record, site, bit in b.outcomes:
                entry = records.setdefault(record, {}).setdefault(site, 0.0)
                records[record][site] = entry + (b.weight if bit else 0.0)
    return {r: {s: observables.clean(p) for s, p in sorted(v.items())} for r, v in sorted(records.items())}


def _forster_warnings(program) -> list[Diagnostic]:
    from ..atoms import rydberg
    out = []
    for name, sp in program.rig.species.items():
        for other_name, other in program.rig.species.items():
            if name > other_name or sp.rydberg is None or other.rydberg is None:  # same species too
                continue
            c6 = rydberg.c6_hz_m6(sp.data, sp.rydberg, other.data, other.rydberg)
            if c6.near_forster:
                out.append(warning(f"the {name}-{other_name} pair ({sp.rydberg.label} + {other.rydberg.label}) "
                                   f"is {c6.forster_defect_hz / 1e6:.3g} MHz from a Förster resonance; "
                                   "the van der Waals C6 is not to be trusted", sp.span))
    return out
