"""`seqlang.simulate`: the played timeline of a sequence, simulated.

>>> result = seqlang.simulate("programs/bell_pair.seq")     # doctest: +SKIP
>>> result.expectations[0]["fidelity"]                       # doctest: +SKIP
"""
from __future__ import annotations

import math
import sys
from dataclasses import dataclass, field, replace

import numpy as np

from ..lang.diagnostics import Diagnostic, warning
from . import engine as fast
from . import noise, observables
from . import shared as shared_noise
from .basis import (Basis, full_basis, norms, partial_trace_density, partial_trace_kets, probabilities, reduced_basis,
                    site_populations)
from .clusters import clusters as find_clusters
from .model import DIM, G0, G1, INTERMEDIATE, LOST, RYD, Model, build_model, leg_rabi, pair_interactions_hz
from .solve import propagate

ENGINES = ("auto", "fast", "lindblad", "qutip")
OPTIONS = {"interactions_hz": None, "history": False, "ladder": False, "noise": "off", "shots": 200, "seed": 1,
           "engine": "auto", "truncate": True, "repetitions": None, "progress": False,
           "shared_noise": True, "feed_forward": True}
# Outcomes rarer than this are not worth a conditioned report.
MIN_CONDITION_PROBABILITY = 1e-9
# Drop |rr⟩ of strongly blockaded pairs while the estimated error stays below this
# (see engine.blockade_truncation).
TRUNCATION_TOLERANCE = 1e-4
SHOT_CHUNK = 100  # shots propagated together; an interrupt keeps every finished chunk
FULL_DENSITY_SITES = 5  # expectations over more sites are read from the qubit block only


@dataclass(frozen=True)
class ClusterResult:
    """One independently simulated group of atoms: per branch, its states for every shot."""

    model: Model
    basis: Basis
    outcomes: tuple[tuple[tuple[str, str, int], ...], ...]
    states: tuple[np.ndarray, ...]  # (shots, D) kets or (shots, D, D) density matrices
    history: tuple = ()
    engine: str = "qutip"
    readout: dict = field(default_factory=dict)  # site → (false positive, false negative)

    @property
    def shots(self) -> int:
        return self.states[0].shape[0] if self.states else 1

    @property
    def is_density(self) -> bool:
        return bool(self.states) and self.states[0].ndim == 3

    def factors(self, condition) -> list[float]:
        """Weight of each branch given a *reported* imaging outcome (readout errors included)."""
        if condition is None or condition[1] not in self.model.sites:
            return [1.0] * len(self.outcomes)
        record, site, bit = condition
        fp, fn = self.readout.get(site, (0.0, 0.0))
        out = []
        for labels in self.outcomes:
            true = [b for r, s, b in labels if r == record and s == site]
            if not true:
                out.append(0.0)
            elif true[0] == 1:
                out.append(1 - fn if bit == 1 else fn)
            else:
                out.append(fp if bit == 1 else 1 - fp)
        return out

    def reduced(self, keep: list[int], condition=None, shot: int | None = None, dim: int = DIM) -> np.ndarray:
        """Reduced density matrix of sites `keep`, averaged over shots: 4 levels per atom, or
        with ``dim=2`` only the qubit block."""
        total = np.zeros((dim ** len(keep),) * 2, dtype=complex)
        for factor, state in zip(self.factors(condition), self.states):
            if factor == 0:
                continue
            chosen = state if shot is None else state[shot:shot + 1]
            trace = partial_trace_density if self.is_density else partial_trace_kets
            total += factor * trace(self.basis, chosen, keep, dim) / chosen.shape[0]
        return total

    def level_probability(self, keep: list[int], level: int) -> float:
        """Probability that at least one of the sites `keep` is in `level` (lost norm: LOST)."""
        probs = self._probabilities()
        hit = probs[(self.basis.levels[:, keep] == level).any(axis=1)].sum()
        return float(hit + (max(0.0, 1.0 - probs.sum()) if level == LOST else 0.0))

    def weight(self, condition) -> float:
        """Probability of a reported outcome; norm lost before imaging counts as a dark atom."""
        kept = [norms(s, self.is_density).mean() for s in self.states]
        total = float(sum(f * n for f, n in zip(self.factors(condition), kept)))
        if condition is not None and condition[1] in self.model.sites:
            fp = self.readout.get(condition[1], (0.0, 0.0))[0]
            total += (fp if condition[2] == 1 else 1 - fp) * max(0.0, 1.0 - float(sum(kept)))
        return total

    def populations(self) -> np.ndarray:
        """populations[site, level] (4 levels), averaged over shots and branches
        (lost norm counts in |x⟩, see basis.site_populations)."""
        return site_populations(self.basis, self._probabilities())

    def _probabilities(self) -> np.ndarray:
        """Probability of each kept state, summed over branches and averaged over shots."""
        return sum(probabilities(s, self.is_density).mean(axis=0) for s in self.states)

    def density(self, condition=None) -> np.ndarray:
        return self.reduced(list(range(self.model.size)), condition)

    def full_ket(self) -> np.ndarray:
        """The final ket over all 4ⁿ levels, for a run with one branch and one shot."""
        if self.is_density or len(self.states) != 1 or self.shots != 1:
            raise ValueError("a single ket needs one branch, one shot and no density-matrix engine")
        ket = np.zeros(DIM ** self.model.size, dtype=complex)
        inside = (self.basis.levels < DIM).all(axis=1)
        full = full_basis(self.model.size, DIM)
        ket[full.find(full.key_of(self.basis.levels[inside]))] = self.states[0][0, inside]
        return ket


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
    engine: str = "qutip"
    reduction: dict = field(default_factory=dict)
    program: object = field(default=None, repr=False, compare=False)  # for array summaries

    def reduced_density(self, sites: tuple[str, ...], condition=None) -> np.ndarray:
        """Density matrix (4 levels per atom) of `sites`, optionally given one imaging outcome."""
        return reduced_density(self.clusters, sites, condition)

    def final_state(self) -> dict[tuple[str, ...], np.ndarray]:
        """Density matrix of each cluster, averaged over imaging outcomes and shots."""
        return {c.model.sites: c.density() for c in self.clusters}

    def _repr_html_(self) -> str:
        """Jupyter: a compact table of the expectations, and the correlator figure."""
        from ..report.notebook import result_html
        return result_html(self)

    def to_xarray(self):
        """Expectations, final populations and any population history as an xarray.Dataset."""
        from ..report.notebook import result_dataset
        return result_dataset(self)

    def to_dataframe(self):
        """One row per expectation as a pandas DataFrame (pandas is optional)."""
        from ..report.notebook import result_dataframe
        return result_dataframe(self)


def reduced_density(clusters, sites, condition=None, shot: int | None = None, dim: int = DIM) -> np.ndarray:
    """Tensor product of the clusters' reduced states, reordered as `sites`."""
    parts, order = [], []
    for cluster in clusters:
        keep = [i for i, s in enumerate(cluster.model.sites) if s in sites]
        if not keep:
            continue
        parts.append(cluster.reduced(keep, condition, shot, dim))
        order += [cluster.model.sites[i] for i in keep]
    rho = parts[0]
    for part in parts[1:]:
        rho = np.kron(rho, part)
    return _reorder(rho, order, list(sites), dim)


def _reorder(rho: np.ndarray, have: list[str], want: list[str], dim: int = DIM) -> np.ndarray:
    n = len(have)
    perm = [have.index(s) for s in want]
    tensor = rho.reshape([dim] * (2 * n)).transpose(perm + [p + n for p in perm])
    return tensor.reshape(rho.shape)


def simulate(source, **options) -> SimulationResult:
    """Simulate a sequence file path or a loaded :class:`seqlang.Sequence`."""
    unknown = set(options) - set(OPTIONS)
    if unknown:
        raise TypeError(f"unknown simulate option(s): {', '.join(sorted(unknown))}")
    options = {**OPTIONS, **options}
    if options["engine"] not in ENGINES:
        raise ValueError(f"unknown engine {options['engine']!r}; use one of {', '.join(ENGINES)}")
    from ..api import Sequence, load
    sequence = source if isinstance(source, Sequence) else load(str(source))
    program, timeline = sequence.program, sequence.played
    interactions = options["interactions_hz"]
    warnings = []
    if interactions is None:
        interactions = pair_interactions_hz(program, tuple(program.sites))
        warnings = _forster_warnings(program)
    if options["ladder"] and not any(leg_rabi(d, 1.0) for d in program.rig.drives.values()):
        warnings.append(warning("ladder mode: no Rydberg drive declares `intermediate`, `lower_rabi` and "
                                "`upper_rabi`, so the explicit ladder is the effective model", program.rig.span))
    sources = noise.parse_sources(options["noise"]) if isinstance(options["noise"], str) else tuple(options["noise"])
    conditioned = bool(timeline.conditioned())
    shots = options["shots"] if noise.is_sampled(sources) or conditioned else 1
    rng = np.random.default_rng(options["seed"])
    runner = _ClusterRunner(program, options, sources, shots, rng)
    if options["shared_noise"]:
        runner.shared = shared_noise.draw_shared(list(program.rig.drives), shots, options["seed"])
    groups = find_clusters(program, timeline, interactions)
    if conditioned:  # imaging outcomes sampled per shot, conditioned operations use them
        from . import feedforward
        ff = feedforward.run(runner, timeline, groups, interactions)
        results = ff.with_ff if options["feed_forward"] else ff.without
    else:
        ff = None
        results = [runner.run(build_model(program, timeline, group, interactions, ladder=options["ladder"]))
                   for group in groups]
    done = min(r.shots for r in results) if shots > 1 else 1
    repetitions = options["repetitions"] or done
    expectations = tuple(_with_errors(_expectation(program, results, e), results, repetitions, done)
                         for e in program.expects)
    if ff is not None:
        expectations = tuple({**e, "conditioned": ff.conditioned(program, x) if options["feed_forward"]
                              else e["conditioned"],
                              "feed_forward": ff.summary(program, x, _expectation,
                                                         e if options["feed_forward"] else None)}
                             for e, x in zip(expectations, program.expects))
    if options["repetitions"]:
        expectations = tuple({**e, "sampled_counts": sample_counts(e["populations"], repetitions,
                                                                   (options["seed"], k))}
                             for k, e in enumerate(expectations))
    info = {"sources": list(sources), "shots": done, "seed": options["seed"], "repetitions": repetitions,
            "shared_noise": bool(options["shared_noise"])}
    if runner.interrupted:
        info["interrupted"] = f"stopped after {done} of {shots} shots"
    engines = sorted({r.engine for r in results})
    return SimulationResult(program.name, tuple(results), expectations, _records(results), interactions,
                            tuple(warnings), info, "+".join(engines), runner.reduction, program)


class _ClusterRunner:
    """Draws the shots of a cluster and propagates them with the chosen engine."""

    def __init__(self, program, options, sources, shots, rng):
        self.program, self.options, self.sources, self.shots, self.rng = program, options, sources, shots, rng
        self.interrupted = False
        self.shared = None  # classical noise shared by the array (sim/shared.py)
        self.reduction: dict = {"truncated_pairs": [], "neglected_bound": 0.0, "states": 0, "full_states": 0}

    def run(self, nominal: Model) -> ClusterResult:
        program, sources = self.program, self.sources
        model = noise.prepare(program, nominal, sources)
        jumps = noise.jumps(program, model, sources)
        engine = _choose(self.options["engine"], jumps)
        readout = {name: noise.readout_errors(program, sp, sources) for name, sp in zip(model.sites, model.species)}
        shots = self._draw(model)
        if engine == "qutip":
            result = self._qutip(model, shots, jumps)
        else:
            result = self._fast(model, shots, jumps, engine == "lindblad")
        return ClusterResult(nominal, result[0], result[1], result[2], result[3], engine, readout)

    def _draw(self, model: Model) -> noise.Shots:
        if not noise.is_sampled(self.sources):
            return noise.nominal_shots(model)
        draws = shared_noise.apply(self.shared, model, noise.draw(model, self.shots, self.rng), self.rng)
        return noise.sample(self.program, model, self.sources, draws)

    def _basis(self, model: Model, jumps, density: bool) -> Basis:
        rydberg = {c.site for seg in model.segments for c in seg.couplings if RYD in (c.lower, c.upper)}
        ladder = {c.site for seg in model.segments for c in seg.couplings if INTERMEDIATE in (c.lower, c.upper)}
        lossy = noise.lossy_sites(self.program, model, self.sources)
        if density:  # density matrices carry |x⟩ explicitly wherever decay or scattering can lead
            lossy |= {j.site for j in jumps if j.target == LOST}
            lossy |= {x.site for seg in model.segments for x in seg.shifts if x.loss_rate > 0}
        allowed = [(G0, G1) + ((RYD,) if i in rydberg else ()) + ((LOST,) if i in lossy else ())
                   + ((INTERMEDIATE,) if i in ladder else ()) for i in range(model.size)]
        candidates = replace(model, interactions={p: v for p, v in model.interactions.items()
                                                  if p[0] in rydberg and p[1] in rydberg})
        pairs, bound = (fast.blockade_truncation(candidates, TRUNCATION_TOLERANCE) if self.options["truncate"]
                        else ((), 0.0))
        basis = reduced_basis(allowed, model.dim, pairs, bound)
        r = self.reduction
        r["truncated_pairs"] += [[model.sites[i], model.sites[j]] for i, j in pairs]
        r["neglected_bound"] = observables.clean(r["neglected_bound"] + bound)
        r["states"] += basis.size
        r["full_states"] += model.dim ** model.size
        return basis

    def _fast(self, model: Model, shots: noise.Shots, jumps, density: bool):
        basis = self._basis(model, jumps, density)
        loss = noise.image_loss(self.program, self.sources)
        merged: dict[tuple, list[np.ndarray]] = {}
        history = ()
        progress = _Progress(shots.count) if self.options["progress"] and shots.count > SHOT_CHUNK else None
        done = 0
        try:
            for lo in range(0, shots.count, SHOT_CHUNK):
                chunk = shots.rows(lo, lo + SHOT_CHUNK)
                found = fast.run(basis, chunk, jumps, density, loss, self.options["history"])
                _merge(merged, found.outcomes, found.states, done)
                history = history or tuple(found.history)
                done += chunk.count
                if progress:
                    progress.update(done)
        except KeyboardInterrupt:
            if done == 0:
                raise
            self.interrupted = True
        finally:
            if progress:
                progress.close()
        outcomes = tuple(sorted(merged))
        return basis, outcomes, tuple(_pad(merged[o], done) for o in outcomes), history

    def _qutip(self, model: Model, shots: noise.Shots, jumps):
        c_ops = noise.collapse_operators(self.program, model, self.sources)
        basis = full_basis(model.size, model.dim)
        self.reduction["states"] += basis.size
        self.reduction["full_states"] += basis.size
        loss = noise.image_loss(self.program, self.sources)
        merged: dict[tuple, list[np.ndarray]] = {}
        history = ()
        for k in range(shots.count):
            initial = basis.state(shots.initial[k])
            draws = tuple(d[k] for d in shots.image_draws)
            found, hist = propagate(shots.shot_model(k), c_ops, self.options["history"], initial, loss, draws)
            history = history or tuple(hist)
            _merge(merged, [b.outcomes for b in found], [b.state[None] for b in found], k)
        outcomes = tuple(sorted(merged))
        return basis, outcomes, tuple(_pad(merged[o], shots.count) for o in outcomes), history


def _choose(requested: str, jumps) -> str:
    """The engine for a model: Lindblad when dissipation returns into the simulated states."""
    returning = fast.needs_lindblad(jumps)
    if requested == "auto":
        return "lindblad" if returning else "fast"
    if requested == "fast" and returning:
        raise ValueError("the fast engine needs all dissipation to end in the loss level; this model has decay "
                         "back into the qubit space or pure dephasing: use --engine lindblad or auto")
    return requested


def _merge(merged: dict, outcomes, states, offset: int) -> None:
    """Collect per-branch state arrays over chunks of shots: (first shot index, array)."""
    for labels, state in zip(outcomes, states):
        merged.setdefault(tuple(labels), []).append((offset, state))


def _pad(parts: list, total: int) -> np.ndarray:
    """One (shots, …) array per branch, with zeros for shots where the branch was dropped."""
    first = parts[0][1]
    out = np.zeros((total,) + first.shape[1:], dtype=complex)
    for offset, state in parts:
        out[offset:offset + state.shape[0]] = state[: total - offset]
    return out


class _Progress:
    """A one-line progress bar on stderr, for long Monte Carlo runs on a terminal."""

    def __init__(self, total: int):
        self.total, self.live = total, sys.stderr.isatty()

    def update(self, done: int) -> None:
        if self.live:
            filled = int(30 * done / self.total)
            sys.stderr.write(f"\r  shots [{'#' * filled}{'.' * (30 - filled)}] {done}/{self.total}")
            sys.stderr.flush()

    def close(self) -> None:
        if self.live:
            sys.stderr.write("\n")


def _with_errors(expectation: dict, clusters, repetitions: int, shots: int) -> dict:
    """Binomial error bars for `repetitions` runs of the experiment, the Monte Carlo standard
    error of the fidelity, and a sampled histogram of the expected sites' outcomes."""
    out = dict(expectation)
    out["populations_error"] = {k: observables.clean(noise.binomial_error(v, repetitions))
                                for k, v in expectation["populations"].items()}
    inside = [c for c in clusters if set(expectation["sites"]) <= set(c.model.sites)]
    if inside and shots > 1:
        from .feedforward import shot_fidelities
        state = expectation["state"]
        fast_values = shot_fidelities(inside[:1], _Expect(tuple(expectation["sites"]), state, state.startswith("|")))
        values = fast_values if fast_values is not None else \
            [_shot_fidelity(inside[0], k, expectation) for k in range(inside[0].shots)]
        out["fidelity_error"] = observables.clean(np.std(values, ddof=1) / math.sqrt(len(values)))
    return out


@dataclass(frozen=True)
class _Expect:
    sites: tuple[str, ...]
    state: str
    is_ket: bool


def _shot_fidelity(cluster: ClusterResult, shot: int, expectation) -> float:
    block = reduced_density([cluster], tuple(expectation["sites"]), shot=shot, dim=2)
    state = expectation["state"]
    target = observables.target_state(state.strip("|>"), state.startswith("|"))
    return float(np.real(np.vdot(target, block @ target)))


def _expectation(program, clusters, expect) -> dict:
    out = {"sites": list(expect.sites), "state": expect.state if not expect.is_ket else f"|{expect.state}>"}
    if len(expect.sites) <= FULL_DENSITY_SITES:
        rho = reduced_density(clusters, expect.sites)
        out.update(observables.summarize(rho, len(expect.sites), expect.state, expect.is_ket))
    else:  # many atoms: the qubit block only, and the level probabilities from the states
        block = reduced_density(clusters, expect.sites, dim=2)
        out.update(observables.summarize_block(block, len(expect.sites), expect.state, expect.is_ket,
                                               _any_level(clusters, expect.sites, RYD),
                                               _any_level(clusters, expect.sites, LOST)))
    out["conditioned"] = _conditioned(program, clusters, expect)
    return out


def _any_level(clusters, sites, level: int) -> float:
    """P(at least one of `sites` in `level`), clusters being independent."""
    none = 1.0
    for c in clusters:
        keep = [i for i, s in enumerate(c.model.sites) if s in sites]
        if keep:
            none *= 1.0 - c.level_probability(keep, level)
    return 1.0 - none


def _conditioned(program, clusters, expect) -> list[dict]:
    """The expected sites' numbers given each reported imaging outcome of another site."""
    out = []
    for cluster in clusters:
        labels = sorted({lab[:2] for o in cluster.outcomes for lab in o if lab[1] not in expect.sites})
        for record, site in labels if len(expect.sites) <= FULL_DENSITY_SITES else ():
            for bit in (0, 1):
                condition = (record, site, bit)
                weight = cluster.weight(condition)
                if weight < MIN_CONDITION_PROBABILITY:
                    continue
                rho = reduced_density(clusters, expect.sites, condition)
                rho = rho / np.trace(rho).real
                numbers = observables.summarize(rho, len(expect.sites), expect.state, expect.is_ket)
                out.append({"record": record, "site": site, "outcome": bit,
                            "probability": observables.clean(weight), **numbers})
    return out


def _records(clusters) -> dict:
    """Probability of a reported bright outcome per record and site (readout errors included)."""
    records: dict = {}
    for cluster in clusters:
        names = sorted({lab[:2] for o in cluster.outcomes for lab in o})
        for record, site in names:
            records.setdefault(record, {})[site] = cluster.weight((record, site, 1))
    return {r: {s: observables.clean(p) for s, p in sorted(v.items())} for r, v in sorted(records.items())}


def sample_counts(probabilities: dict[str, float], repetitions: int, seed) -> dict[str, int]:
    """A sampled histogram: `repetitions` draws of the outcomes, with what is left as "other"."""
    labels = list(probabilities)
    p = np.clip(np.array([probabilities[k] for k in labels]), 0, None)
    rest = max(0.0, 1.0 - p.sum())
    counts = np.random.default_rng(seed).multinomial(repetitions, np.append(p, rest) / (p.sum() + rest))
    return {**dict(zip(labels, map(int, counts[:-1]))), "other": int(counts[-1])}


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
