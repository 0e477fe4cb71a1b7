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
from . import limits, noise, observables, statistics
from . import shared as shared_noise
from .basis import Basis, full_basis, norms, partial_trace_density, partial_trace_kets, probabilities, site_populations
from .clusters import CLUSTER_THRESHOLD, representatives, smallest_rydberg_rabi_hz
from .clusters import clusters as find_clusters
from .model import DIM, LOST, RYD, Model, build_model, leg_rabi, pair_interactions_hz, with_latency_remainders
from .runner import SHOT_CHUNK, TRUNCATION_TOLERANCE, Plan, Progress, Runner, final_states  # noqa: F401

ENGINES = ("auto", "fast", "trajectories", "lindblad", "qutip")
OPTIONS = {"interactions_hz": None, "history": False, "ladder": False, "noise": "off", "shots": 200, "seed": 1,
           "engine": "auto", "truncate": True, "repetitions": None, "progress": False,
           "memory_limit": limits.MEMORY_LIMIT, "shared_noise": True, "feed_forward": True}
# Outcomes rarer than this are not worth a conditioned report.
MIN_CONDITION_PROBABILITY = 1e-9
# Expectations over more sites are read from the qubit block and level probabilities (the
# same numbers without the 4ⁿ × 4ⁿ reduced density matrix: 16 MB for five atoms).
FULL_DENSITY_SITES = 4
CONDITIONED_SITES = 5  # expectations over more sites list no numbers given an imaging outcome
MAX_CONDITIONED_CLUSTERS = 16  # larger arrays list conditions only within the expectation's clusters


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
    representative: int = 0  # clusters simulated by one run share this number (and their shots)
    sampled: bool = False  # shots are Monte Carlo samples (sampled noise or trajectories)

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

    def shot_weights(self, condition) -> np.ndarray:
        """(shots,) probability of a reported outcome in each shot (as `weight`, per shot)."""
        kept = [norms(s, self.is_density) for s in self.states]
        total = sum(f * n for f, n in zip(self.factors(condition), kept))
        fp = self.readout.get(condition[1], (0.0, 0.0))[0]
        return total + (fp if condition[2] == 1 else 1 - fp) * np.maximum(0.0, 1.0 - sum(kept))

    def shot_populations(self) -> np.ndarray:
        """(shots, sites, 4) level populations per shot (lost norm in |x⟩)."""
        probs = statistics.shot_probabilities(self)
        onehot = np.stack([(self.basis.levels == level) for level in range(DIM)], axis=-1).astype(float)
        out = np.einsum("sk,kil->sil", probs, onehot)
        out[:, :, LOST] += np.maximum(0.0, 1.0 - probs.sum(axis=1))[:, None]
        return out

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
    pair_models: dict = field(default_factory=dict)  # (a, b) -> atoms.pairs.PairShift, when computed here
    program: object = field(default=None, repr=False, compare=False)  # for array summaries
    # (a, b) -> ((start_s, PairShift), ...): the pair's shift from each later change of geometry on
    # (through and after a move, at a field edge); the first one is in pair_models.
    pair_tracks: dict = field(default_factory=dict)
    # Output → latency remainder (s) applied to its pulses and imagings (the nonzero ones).
    latency_remainders_s: dict = field(default_factory=dict)

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
    """Simulate a sequence file path or a loaded :class:`seqlang.Sequence`.

    Options (defaults in ``OPTIONS``):

    * ``noise``: "off", "all", a comma list or a tuple of sources (``noise.SOURCES``);
    * ``shots`` (200), ``seed`` (1): Monte Carlo shots of sampled noise or trajectories;
    * ``engine``: "auto", "fast", "trajectories", "lindblad" or "qutip";
    * ``truncate`` (True): blockade truncation of strongly shifted |rr⟩;
    * ``repetitions``: also draw a histogram of that many experiment repetitions;
    * ``ladder`` (False): keep the intermediate state of Rydberg drives explicit;
    * ``interactions_hz``: pair shifts to use instead of the atomic data;
    * ``history`` (False): record level populations along the sequence;
    * ``progress`` (False): a progress bar and the time estimate on a terminal;
    * ``memory_limit`` (4 GiB): refuse runs estimated above this many bytes.
    """
    unknown = set(options) - set(OPTIONS)
    if unknown:
        raise TypeError(f"unknown simulate option(s): {', '.join(sorted(unknown))}; "
                        f"known: {', '.join(OPTIONS)}")
    options = {**OPTIONS, **options}
    if options["engine"] not in ENGINES:
        raise ValueError(f"unknown engine {options['engine']!r}; use one of {', '.join(ENGINES)}")
    from ..api import Sequence, load
    sequence = source if isinstance(source, Sequence) else load(str(source))
    program = sequence.program
    # What the atoms see: the played timeline with each output's sub-tick latency remainder.
    remainders = {port: r for port, r in sequence.checked.plan.latency_remainder_s.items() if r}
    timeline = with_latency_remainders(sequence.played, remainders)
    sources = noise.parse_sources(options["noise"]) if isinstance(options["noise"], str) else tuple(options["noise"])
    limits.check_shots(options["shots"])
    interactions = options["interactions_hz"]
    warnings, pair_models, tracks = [], {}, {}
    if interactions is None:
        # Near pairs only (one C6 per species pair; every pair when sites move), then the pair
        # model of each near Rydberg pair at each of its geometries (atoms.pairs).
        from ..compile.geometry import pair_shift_track
        moving = any(e.kind == "move" for e in timeline.events)
        cutoff = 0.0 if moving else CLUSTER_THRESHOLD * smallest_rydberg_rabi_hz(program, timeline)
        interactions = pair_interactions_hz(program, tuple(program.sites), cutoff)
        tracks = pair_shift_track(program, timeline, pairs=set(interactions))
        pair_models = {pair: track[0][1] for pair, track in tracks.items()}
        interactions.update({pair: model.shift_hz for pair, model in pair_models.items()})
        warnings = _forster_warnings(program)
    hz_tracks = {pair: tuple((t, shift.shift_hz, r) for t, shift, r in track) for pair, track in tracks.items()}
    # Clusters by each pair's strongest shift over the sequence (a move can bring atoms together).
    strongest = {**interactions, **{pair: max((v for _, v, _ in track), key=abs)
                                    for pair, track in hz_tracks.items()}}
    if options["ladder"] and not any(leg_rabi(d, 1.0) for d in program.rig.drives.values()):
        warnings.append(warning("ladder mode: no Rydberg drive declares `intermediate`, `lower_rabi` and "
                                "`upper_rabi`, so the explicit ladder is the effective model", program.rig.span))
    if timeline.conditioned():  # measurement-conditioned operations: the feed-forward path
        result = _feed_forward(program, timeline, options, sources, interactions, warnings, strongest, hz_tracks)
        return replace(result, latency_remainders_s=remainders)
    models = [build_model(program, timeline, group, interactions, ladder=options["ladder"], tracks=hz_tracks)
              for group in find_clusters(program, timeline, strongest)]
    # Identical clusters share one run; not yet when the sequence images (records are
    # read per cluster from its own outcomes).
    images = any(e.kind == "image" for e in timeline.events)
    reps = list(range(len(models))) if images else representatives(program, models)
    runner = Runner(program, options, sources, np.random.default_rng(options["seed"]))
    if options["shared_noise"] and noise.is_sampled(sources):
        runner.shared = shared_noise.draw_shared(list(program.rig.drives), options["shots"], options["seed"])
    plans = {r: runner.plan(models[r], r) for r in sorted(set(reps))}
    seconds, total_bytes = runner.check(list(plans.values()), reps)
    stochastic = [p for p in plans.values() if p.stochastic]
    progress = None
    if options["progress"]:
        _announce(runner.notes, seconds, total_bytes, plans)
        if stochastic and options["shots"] > SHOT_CHUNK:
            progress = Progress(options["shots"])
    try:
        runner.run(list(plans.values()), progress)
    finally:
        if progress:
            progress.close()
    results = tuple(_cluster_result(plans[r], models[k], r) for k, r in enumerate(reps))
    done = min((p.done for p in stochastic), default=0)
    expectations = tuple(_expectation(program, results, e) for e in program.expects)
    info = {"sources": list(sources), "seed": options["seed"]}
    if stochastic:
        info["shots"] = done
    else:
        info["exact"] = True  # no sampled noise and no trajectories: nothing here carries an error bar
    if options["repetitions"]:
        info["repetitions"] = options["repetitions"]
        expectations = tuple({**e, "sampled_counts": sample_counts(e["populations"], options["repetitions"],
                                                                   (options["seed"], k)),
                              "sampled_error": {key: observables.clean(noise.binomial_error(v, options["repetitions"]))
                                                for key, v in e["populations"].items()}}
                             for k, e in enumerate(expectations))
    if runner.interrupted:
        info["interrupted"] = f"stopped after {done} of {options['shots']} shots"
    if runner.notes:
        info["notes"] = list(runner.notes)
    if noise.is_sampled(sources):
        info["shared_noise"] = bool(options["shared_noise"])
    engines = sorted({r.engine for r in results})
    return SimulationResult(program.name, results, expectations, _records(results), interactions,
                            tuple(warnings), info, "+".join(engines), runner.reduction, pair_models, program,
                            pair_tracks=_later_shifts(tracks), latency_remainders_s=remainders)


def _later_shifts(tracks: dict) -> dict:
    """(a, b) → ((start_s, PairShift), ...) of the pairs whose shift changes after the first pulse."""
    return {pair: tuple((t, shift) for t, shift, _ in track[1:]) for pair, track in tracks.items() if len(track) > 1}


def _feed_forward(program, timeline, options, sources, interactions, warnings, strongest=None,
                  tracks=None) -> SimulationResult:
    """Programs with measurement-conditioned operations (seqlang/sim/feedforward.py): every
    cluster shot by shot with sampled imaging outcomes, with and without feed-forward."""
    from . import feedforward
    shots = options["shots"]
    runner = _ClusterRunner(program, options, sources, shots, np.random.default_rng(options["seed"]))
    if options["shared_noise"]:
        runner.shared = shared_noise.draw_shared(list(program.rig.drives), shots, options["seed"])
    groups = find_clusters(program, timeline, strongest if strongest is not None else interactions)
    ff = feedforward.run(runner, timeline, groups, interactions, tracks)
    results = tuple(replace(r, sampled=True) for r in (ff.with_ff if options["feed_forward"] else ff.without))
    expectations = tuple(_expectation(program, results, e) for e in program.expects)
    expectations = tuple({**e, "conditioned": ff.conditioned(program, x) if options["feed_forward"]
                          else e["conditioned"],
                          "feed_forward": ff.summary(program, x, _expectation,
                                                     e if options["feed_forward"] else None)}
                         for e, x in zip(expectations, program.expects))
    if options["repetitions"]:
        expectations = tuple({**e, "sampled_counts": sample_counts(e["populations"], options["repetitions"],
                                                                   (options["seed"], k))}
                             for k, e in enumerate(expectations))
    done = min(r.shots for r in results)
    info = {"sources": list(sources), "shots": done, "seed": options["seed"],
            "shared_noise": bool(options["shared_noise"])}
    if options["repetitions"]:
        info["repetitions"] = options["repetitions"]
    engines = sorted({r.engine for r in results})
    return SimulationResult(program.name, results, expectations, _records(results), interactions,
                            tuple(warnings), info, "+".join(engines), runner.reduction, program=program)


def _choose(requested: str, jumps) -> str:
    """The engine of the feed-forward path: Lindblad when dissipation returns into the kept states."""
    returning = fast.needs_lindblad(jumps)
    if requested in ("auto", "trajectories"):
        return "lindblad" if returning else "fast"
    if requested == "fast" and returning:
        raise ValueError("the fast engine needs all dissipation to end in the loss level; this model has decay "
                         "back into the qubit space or pure dephasing: use --engine lindblad or auto")
    return requested


class _ClusterRunner:
    """What the feed-forward path asks of a runner: draws with shared noise, and the basis."""

    def __init__(self, program, options, sources, shots, rng):
        self.program, self.options, self.sources, self.shots, self.rng = program, options, sources, shots, rng
        self.interrupted = False
        self.shared = None  # classical noise shared by the array (sim/shared.py)
        self._planner = Runner(program, options, sources, rng)
        self.reduction = self._planner.reduction

    def _draw(self, model: Model) -> noise.Shots:
        if not noise.is_sampled(self.sources):
            return noise.nominal_shots(model)
        draws = shared_noise.apply(self.shared, model, noise.draw(model, self.shots, self.rng), self.rng)
        return noise.sample(self.program, model, self.sources, draws)

    def _basis(self, model: Model, jumps, density: bool) -> Basis:
        basis = self._planner._basis(model, jumps, density)
        self._planner._count(basis, model)
        return basis


def _announce(notes: list[str], seconds: float, total_bytes: int, plans) -> None:
    """On a terminal: why an engine was chosen, and the estimate when the run will take a while."""
    if not sys.stderr.isatty():
        return
    for note in notes:
        sys.stderr.write(f"seqlang: {note}\n")
    if seconds > limits.ESTIMATE_SECONDS:
        engines = ", ".join(sorted({p.engine for p in plans.values()}))
        states = max(p.basis.size for p in plans.values())
        sys.stderr.write(f"seqlang: estimated {limits.describe(seconds, total_bytes)} (engine {engines}, "
                         f"largest cluster {states:,} states)\n")


def _cluster_result(plan: Plan, model: Model, rep: int) -> ClusterResult:
    outcomes, states = final_states(plan)
    return ClusterResult(model, plan.basis, outcomes, states, plan.history, plan.engine, dict(
        zip(model.sites, (plan.readout[s] for s in plan.nominal.sites))), rep, plan.stochastic)


def _expectation(program, clusters, expect) -> dict:
    """The numbers of one `expect`, with Monte Carlo errors where a cluster was sampled."""
    count = len(expect.sites)
    out = {"sites": list(expect.sites), "state": expect.state if not expect.is_ket else f"|{expect.state}>"}
    phase = getattr(expect, "phase_rad", 0.0)
    if phase:
        out["phase_rad"] = observables.clean(phase)
    if count <= FULL_DENSITY_SITES:
        rho = reduced_density(clusters, expect.sites)
        out.update(observables.summarize(rho, count, expect.state, expect.is_ket, phase))
        block = observables.qubit_block(rho, count)
    else:  # many atoms: the qubit block only, and the level probabilities from the states
        block = reduced_density(clusters, expect.sites, dim=2)
        out.update(observables.summarize_block(block, count, expect.state, expect.is_ket,
                                               _any_level(clusters, expect.sites, RYD),
                                               _any_level(clusters, expect.sites, LOST), phase))
    requested = tuple(getattr(expect, "correlators", ()) or ())
    if requested:
        out["correlators"] = {**out.get("correlators", {}), **observables.pauli_expectations(block, requested)}
    ghz = expect.state == "ghz"
    if ghz:
        out["ghz"] = observables.ghz_numbers(block, count)
    out.update(_errors(clusters, expect, out, block, requested, ghz))
    out["conditioned"] = _conditioned(program, clusters, expect, out)
    return out


def _parts(clusters, sites) -> tuple[list, list[str]]:
    """(cluster, kept indices, representative, sampled, mean qubit block) of each cluster the
    sites touch, and the site order of their product."""
    parts, order = [], []
    for cluster in clusters:
        keep = [i for i, s in enumerate(cluster.model.sites) if s in sites]
        if keep:
            parts.append((cluster, keep, cluster.representative, cluster.sampled and cluster.shots > 1,
                          cluster.reduced(keep, dim=2)))
            order += [cluster.model.sites[i] for i in keep]
    return parts, order


def _errors(clusters, expect, numbers: dict, block: np.ndarray, requested, ghz: bool) -> dict:
    """`*_error` entries for every number of the expectation that was sampled."""
    parts, order = _parts(clusters, expect.sites)
    count = len(expect.sites)
    if not any(p[3] for p in parts) or count > statistics.MAX_ERROR_SITES:
        return {}
    want = list(expect.sites)
    labels = list(numbers["populations"])
    pairs = list(numbers.get("correlators", {})) if count == 2 or requested else []
    target = observables.target_vector(expect.state, expect.is_ket, count, getattr(expect, "phase_rad", 0.0))
    coherence = block[0, -1]
    unit = np.conj(coherence) / abs(coherence) if abs(coherence) > 0 else 1.0
    paulis = [observables.pauli_string(p) for p in pairs]

    linear = _linear_numbers(target, paulis)

    def functional(rho: np.ndarray) -> np.ndarray:
        values = linear(rho)
        if ghz:  # C = 2|ρ₀…₀,₁…₁|, linearised about the mean coherence's phase
            values = np.concatenate([values, 2 * np.real(unit * rho[:, 0, -1])[:, None]], axis=1)
        return values

    errors = statistics.product_errors(parts, functional, lambda rho: _reorder_batch(rho, order, want))
    out = {"fidelity_error": observables.clean(errors[0]),
           "populations_error": {k: observables.clean(v) for k, v in zip(labels, errors[1:1 + len(labels)])}}
    at = 1 + len(labels)
    if paulis:
        out["correlators_error"] = {k: observables.clean(v) for k, v in zip(pairs, errors[at:at + len(pairs)])}
        at += len(pairs)
    if ghz:
        c_error = errors[at]
        p_error = math.hypot(out["populations_error"][labels[0]], out["populations_error"][labels[-1]])
        out["ghz_error"] = {"coherence": observables.clean(c_error),
                            "parity_fidelity": observables.clean(0.5 * math.hypot(p_error, c_error))}
    for key, level in (("residual_rydberg", RYD), ("loss", LOST)):
        error = statistics.any_level_error(parts, level)
        if error is not None:
            out[key + "_error"] = observables.clean(error)
    return out


def _linear_numbers(target: np.ndarray, paulis: list[np.ndarray]):
    """Qubit blocks (S, d, d) → (S, m): fidelity, the populations, then the Pauli correlators
    (all linear in the block, so that ratio and delta-method errors apply)."""
    def numbers(rho: np.ndarray) -> np.ndarray:
        values = [np.real(np.einsum("i,sij,j->s", target.conj(), rho, target))[:, None],
                  np.real(np.diagonal(rho, axis1=1, axis2=2))]
        if paulis:
            values.append(np.stack([np.real(np.einsum("sij,ji->s", rho, p)) for p in paulis], axis=1))
        return np.concatenate(values, axis=1)
    return numbers


def _conditioned_errors(expect, cluster, condition, numbers: dict) -> dict:
    """Monte Carlo errors of the numbers given an outcome in the expectation's own cluster:
    a ratio of per-shot sums (the outcome's weight varies from shot to shot)."""
    if not (cluster.sampled and cluster.shots > 1) or not set(expect.sites) <= set(cluster.model.sites) \
            or len(expect.sites) > statistics.MAX_ERROR_SITES:
        return {}
    keep = [i for i, site in enumerate(cluster.model.sites) if site in expect.sites]
    order, want = [cluster.model.sites[i] for i in keep], list(expect.sites)
    labels, pairs = list(numbers["populations"]), list(numbers.get("correlators", {}))
    target = observables.target_vector(expect.state, expect.is_ket, len(want), getattr(expect, "phase_rad", 0.0))
    errors = statistics.ratio_errors(cluster, keep, cluster.factors(condition),
                                     _linear_numbers(target, [observables.pauli_string(p) for p in pairs]),
                                     lambda rho: _reorder_batch(rho, order, want))
    if errors is None:
        return {}
    out = {"fidelity_error": observables.clean(errors[0]),
           "populations_error": {k: observables.clean(v) for k, v in zip(labels, errors[1:1 + len(labels)])}}
    if pairs:
        out["correlators_error"] = {k: observables.clean(v) for k, v in zip(pairs, errors[1 + len(labels):])}
    return out


def _probability_error(cluster, condition) -> float | None:
    """Monte Carlo standard error of a reported outcome's probability (None when exact)."""
    if not (cluster.sampled and cluster.shots > 1):
        return None
    per_shot = cluster.shot_weights(condition)
    return observables.clean(np.std(per_shot, ddof=1) / math.sqrt(len(per_shot)))


def _reorder_batch(rho: np.ndarray, have: list[str], want: list[str], dim: int = 2) -> np.ndarray:
    n = len(have)
    if have == want:
        return rho
    perm = [have.index(s) for s in want]
    tensor = rho.reshape([rho.shape[0]] + [dim] * (2 * n))
    return tensor.transpose([0] + [1 + p for p in perm] + [1 + p + n for p in perm]).reshape(rho.shape)


def _any_level(clusters, sites, level: int) -> float:
    """P(at least one of `sites` in `level`), clusters being independent."""
    none = 1.0
    for c in clusters:
        keep = [i for i, s in enumerate(c.model.sites) if s in sites]
        if keep:
            none *= 1.0 - c.level_probability(keep, level)
    return 1.0 - none


def _conditioned(program, clusters, expect, unconditioned_numbers: dict) -> list[dict]:
    """The expected sites' numbers given each reported imaging outcome of another site.

    An outcome in an independent cluster leaves the numbers (and their errors) as they are
    (only its probability is computed); those are listed for arrays of up to
    MAX_CONDITIONED_CLUSTERS clusters, outcomes within the expectation's own clusters always.
    """
    same_errors = {k: v for k, v in unconditioned_numbers.items()
                   if k in ("fidelity_error", "populations_error", "correlators_error",
                            "residual_rydberg_error", "loss_error")}
    out = []
    unconditioned = None
    for cluster in clusters:
        touching = bool(set(cluster.model.sites) & set(expect.sites))
        if not touching and len(clusters) > MAX_CONDITIONED_CLUSTERS:
            continue
        labels = sorted({lab[:2] for o in cluster.outcomes for lab in o if lab[1] not in expect.sites})
        for record, site in labels if len(expect.sites) <= CONDITIONED_SITES else ():
            for bit in (0, 1):
                condition = (record, site, bit)
                weight = cluster.weight(condition)
                if weight < MIN_CONDITION_PROBABILITY:
                    continue
                if touching or unconditioned is None:
                    rho = reduced_density(clusters, expect.sites, condition if touching else None)
                    rho = rho / np.trace(rho).real
                    numbers = observables.summarize(rho, len(expect.sites), expect.state, expect.is_ket,
                                                    getattr(expect, "phase_rad", 0.0))
                    errors = _conditioned_errors(expect, cluster, condition, numbers) if touching else same_errors
                    numbers = {**numbers, **errors}
                    if not touching:
                        unconditioned = numbers
                else:
                    numbers = unconditioned
                error = _probability_error(cluster, condition)
                out.append({"record": record, "site": site, "outcome": bit, "probability": observables.clean(weight),
                            **numbers, **({"probability_error": error} if error is not None else {})})
    return out


def _records(clusters) -> dict:
    """Probability of a reported bright outcome per record and site (readout errors included)."""
    records: dict = {}
    for cluster in clusters:
        names = sorted({lab[:2] for o in cluster.outcomes for lab in o})
        for record, site in names:
            records.setdefault(record, {})[site] = cluster.weight((record, site, 1))
    return {r: {s: observables.clean(p) for s, p in sorted(v.items())} for r, v in sorted(records.items())}


def record_errors(clusters) -> dict:
    """Monte Carlo standard errors of the records' P(bright), where sampled."""
    out: dict = {}
    for cluster in clusters:
        if not (cluster.sampled and cluster.shots > 1):
            continue
        for record, site in sorted({lab[:2] for o in cluster.outcomes for lab in o}):
            out.setdefault(record, {})[site] = _probability_error(cluster, (record, site, 1))
    return out


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
