"""`seqlang.simulate`: the played timeline of a sequence, simulated.

>>> result = seqlang.simulate("programs/bell_pair.seq")     # doctest: +SKIP
>>> result.expectations[0]["fidelity"]                       # doctest: +SKIP
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ..lang.diagnostics import Diagnostic, warning
from . import observables
from .clusters import clusters as find_clusters
from .model import Model, build_model, pair_interactions_hz
from .solve import Branch, density_matrix, drop_intermediate, propagate

OPTIONS = {"interactions_hz": None, "history": False, "ladder": False}
# Outcomes rarer than this are not worth a conditioned report.
MIN_CONDITION_PROBABILITY = 1e-9


@dataclass(frozen=True)
class ClusterResult:
    """One independently simulated group of atoms."""

    model: Model
    branches: tuple[Branch, ...]
    history: tuple = ()

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

    def reduced_density(self, sites: tuple[str, ...], condition=None) -> np.ndarray:
        """Density matrix (4 levels per atom) of `sites`, optionally given one imaging outcome."""
        return reduced_density(self.clusters, sites, condition)

    def final_state(self) -> dict[tuple[str, ...], np.ndarray]:
        """Density matrix of each cluster (unnormalised only by loss of nothing: trace 1)."""
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
    results = []
    for group in find_clusters(program, timeline, interactions):
        model = build_model(program, timeline, group, interactions, ladder=options["ladder"])
        branches, history = propagate(model, record_history=options["history"])
        branches = drop_intermediate(model, branches)
        results.append(ClusterResult(replace(model, dim=4), tuple(branches), tuple(history)))
    expectations = tuple(_expectation(program, results, e) for e in program.expects)
    return SimulationResult(program.name, tuple(results), expectations, _records(results), interactions,
                            tuple(warnings))


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
                        "probability": observables._clean(weight), **numbers})
    return out


def _records(clusters) -> dict:
    """Probability of a bright (|1⟩) outcome per record and site."""
    records: dict = {}
    for cluster in clusters:
        for b in cluster.branches:
            for record, site, bit in b.outcomes:
                entry = records.setdefault(record, {}).setdefault(site, 0.0)
                records[record][site] = entry + (b.weight if bit else 0.0)
    return {r: {s: observables._clean(p) for s, p in sorted(v.items())} for r, v in sorted(records.items())}


def _forster_warnings(program) -> list[Diagnostic]:
    from ..atoms import rydberg
    out = []
    for name, sp in program.rig.species.items():
        for other_name, other in program.rig.species.items():
            if name >= other_name or sp.rydberg is None or other.rydberg is None:
                continue
            c6 = rydberg.c6_hz_m6(sp.data, sp.rydberg, other.data, other.rydberg)
            if c6.near_forster:
                out.append(warning(f"the {name}-{other_name} pair ({sp.rydberg.label} + {other.rydberg.label}) "
                                   f"is {c6.forster_defect_hz / 1e6:.3g} MHz from a Förster resonance; "
                                   "the van der Waals C6 is not to be trusted", sp.span))
    return out
