"""Plan and run the clusters of a simulation: engine, basis, shots, limits, chunks.

Each distinct cluster (identical clusters share one representative, see
clusters.representatives) gets a `Plan`: its noise-prepared model, jumps, the
engine, the kept basis and the drawn shots. Everything large is estimated first
(limits.py) and the run refused above the limits. Shots are then propagated in
chunks, chunk-major over the clusters, so that an interrupt leaves every
cluster with the same finished shots.
"""
from __future__ import annotations

import math
import sys
import time
from dataclasses import dataclass, field, replace

import numpy as np

from . import engine as fast
from . import limits, noise, observables
from .basis import Basis, full_basis, reduced_basis
from .model import INTERMEDIATE, LOST, RYD, Model, weakest_interactions
from .solve import propagate

SHOT_CHUNK = 100  # shots propagated together; an interrupt keeps every finished chunk
# Drop |rr⟩ of strongly blockaded pairs while the estimated error stays below this
# (see engine.blockade_truncation).
TRUNCATION_TOLERANCE = 1e-4
# `auto` unravels pure dephasing as trajectories once a cluster keeps more states than this
# (a density matrix of D² elements per shot); smaller clusters get the exact Lindblad engine.
AUTO_DENSITY_STATES = 40
KICK_STREAM = 0x5EED  # mixed into the seed of the dephasing kicks' own stream


@dataclass
class Plan:
    """One representative cluster: what to run and, once run, its states."""

    nominal: Model
    model: Model
    jumps: list
    engine: str
    basis: Basis
    shots: noise.Shots
    stochastic: bool
    readout: dict
    note: str = ""
    rng: np.random.Generator | None = None
    merged: dict = field(default_factory=dict)
    history: tuple = ()
    done: int = 0
    bytes: int = 0
    flops: float = 0.0
    prepared_lost: tuple[int, ...] = ()  # sites a preparation error can start in |x⟩
    imaging_lost: tuple[int, ...] = ()  # sites imaging can lose


def choose_engine(requested: str, jumps, states: int, sampled: bool = False) -> tuple[str, str]:
    """(engine, note) for a model: Lindblad where dissipation returns into the simulated states
    and cannot be unravelled; pure dephasing as trajectories when the density matrix is large,
    or when shots are drawn anyway (sampled noise: the kicks then cost no extra runs)."""
    returning = fast.needs_lindblad(jumps)
    unravel = returning and fast.can_unravel(jumps)
    if requested == "auto":
        if not returning:
            return "fast", ""
        if unravel and states > AUTO_DENSITY_STATES:
            return "trajectories", (f"pure dephasing unravelled as phase-kick trajectories: a density matrix "
                                    f"would hold {states:,}² elements per shot")
        if unravel and sampled:
            return "trajectories", ""
        return "lindblad", ""
    if requested == "fast" and returning:
        raise ValueError("the fast engine needs all dissipation to end in the loss level; this model has decay "
                         "back into the qubit space or pure dephasing: use --engine trajectories (pure "
                         "dephasing), lindblad or auto")
    if requested == "trajectories" and not fast.can_unravel(jumps):
        raise ValueError("the trajectories engine unravels loss and pure dephasing only; this model has decay "
                         "back into the qubit space: use --engine lindblad or auto")
    return requested, ""


class Runner:
    """Plans the representatives, checks the limits, and propagates the shots in chunks."""

    def __init__(self, program, options: dict, sources: tuple[str, ...], rng: np.random.Generator):
        self.program, self.options, self.sources, self.rng = program, options, sources, rng
        self.interrupted = False
        self.shared = None  # classical noise shared by the array (sim/shared.py), drawn once per shot
        self.reduction: dict = {"truncated_pairs": [], "neglected_bound": 0.0, "states": 0, "full_states": 0}
        self.notes: list[str] = []

    # -- planning -----------------------------------------------------------------------------
    def plan(self, nominal: Model, number: int) -> Plan:
        program, sources = self.program, self.sources
        model = noise.prepare(program, nominal, sources)
        jumps = noise.jumps(program, model, sources)
        requested = self.options["engine"]
        density_first = requested in ("lindblad", "qutip") or (requested == "auto" and fast.needs_lindblad(jumps))
        if requested == "qutip":
            basis = full_basis(model.size, model.dim) if model.dim ** model.size <= limits.MAX_STATES else None
            if basis is None:
                raise limits.too_many_states(model.sites, model.dim ** model.size, model.size, True)
            engine, note = "qutip", ""
            self._count(basis, model)
        else:
            basis = self._basis(model, jumps, density_first)
            engine, note = choose_engine(requested, jumps, basis.size, noise.is_sampled(sources))
            if density_first and engine != "lindblad":  # kets need no |x⟩ for decay: a smaller basis
                basis = self._basis(model, jumps, False)
            self._count(basis, model)
        if note:
            self.notes.append(f"cluster {{{', '.join(nominal.sites)}}}: {note}")
        stochastic = noise.is_sampled(sources) or engine == "trajectories"
        shots = self._draw(model, stochastic)
        readout = {name: noise.readout_errors(program, sp, sources) for name, sp in zip(model.sites, model.species)}
        rng = np.random.default_rng([self.options["seed"], KICK_STREAM, number]) if engine == "trajectories" else None
        plan = Plan(nominal, model, jumps, engine, basis, shots, stochastic, readout, note, rng)
        plan.prepared_lost = tuple(sorted(noise.lossy_sites(program, model, tuple(s for s in sources
                                                                                  if s == "preparation"))))
        plan.imaging_lost = tuple(sorted(noise.lossy_sites(program, model, tuple(s for s in sources
                                                                                 if s == "imaging"))))
        plan.bytes, plan.flops = _estimate(plan, engine in ("lindblad", "qutip"))
        return plan

    def _count(self, basis: Basis, model: Model) -> None:
        r = self.reduction
        r["truncated_pairs"] += [[model.sites[i], model.sites[j]] for i, j in basis.truncated_pairs]
        r["neglected_bound"] = observables.clean(r["neglected_bound"] + basis.neglected_bound)
        r["states"] += basis.size
        r["full_states"] += model.dim ** model.size

    def _draw(self, model: Model, stochastic: bool) -> noise.Shots:
        count = self.options["shots"] if stochastic else 1
        if not noise.is_sampled(self.sources):
            shots = noise.nominal_shots(model)
            return replace(shots, initial=shots.initial * count)  # shared parameters, one row per shot
        from . import shared as shared_noise
        draws = shared_noise.apply(self.shared, model, noise.draw(model, count, self.rng), self.rng)
        return noise.sample(self.program, model, self.sources, draws)

    def _basis(self, model: Model, jumps, density: bool) -> Basis:
        rydberg = {c.site for seg in model.segments for c in seg.couplings if RYD in (c.lower, c.upper)}
        ladder = {c.site for seg in model.segments for c in seg.couplings if INTERMEDIATE in (c.lower, c.upper)}
        lossy = noise.lossy_sites(self.program, model, self.sources)
        if density:  # density matrices carry |x⟩ explicitly wherever decay or scattering can lead
            lossy |= {j.site for j in jumps if j.target == LOST}
            lossy |= {x.site for seg in model.segments for x in seg.shifts if x.loss_rate > 0}
        allowed = [(0, 1) + ((RYD,) if i in rydberg else ()) + ((LOST,) if i in lossy else ())
                   + ((INTERMEDIATE,) if i in ladder else ()) for i in range(model.size)]
        candidates = replace(model, interactions={p: v for p, v in weakest_interactions(model).items()
                                                  if p[0] in rydberg and p[1] in rydberg})
        pairs, bound = (fast.blockade_truncation(candidates, TRUNCATION_TOLERANCE) if self.options["truncate"]
                        else ((), 0.0))
        return reduced_basis(allowed, model.dim, pairs, bound, limits.MAX_STATES,
                             lambda count, placed: limits.too_many_states(model.sites, count, placed, density))

    # -- limits and the estimate ----------------------------------------------------------------
    def check(self, plans: list[Plan], uses: list[int]) -> tuple[float, int]:
        """Refuse above the memory limit; return (estimated seconds, bytes)."""
        parts = [("{" + ", ".join(p.nominal.sites) + "}", p.basis.size, p.bytes, p.engine in ("lindblad", "qutip"))
                 for p in plans]
        total = sum(p.bytes for p in plans)
        limits.check_memory(total, parts, self.options["memory_limit"])
        return limits.estimate_seconds(sum(p.flops for p in plans)), total

    # -- running --------------------------------------------------------------------------------
    def run(self, plans: list[Plan], progress) -> None:
        """Deterministic plans first, then the stochastic ones chunk by chunk (chunk-major)."""
        try:
            for plan in plans:
                if not plan.stochastic:
                    self._chunk(plan, 0, 1)
            stochastic = [p for p in plans if p.stochastic]
            total = max((p.shots.count for p in stochastic), default=0)
            for lo in range(0, total, SHOT_CHUNK):
                for plan in stochastic:
                    self._chunk(plan, lo, min(total, lo + SHOT_CHUNK))
                for plan in stochastic:
                    plan.done = min(total, lo + SHOT_CHUNK)
                if progress:
                    progress.update(min(total, lo + SHOT_CHUNK))
        except KeyboardInterrupt:
            if not any(p.done for p in plans if p.stochastic):
                raise
            self.interrupted = True
        for plan in plans:
            if plan.stochastic:
                finished = min(p.done for p in plans if p.stochastic)
                plan.done = finished

    def _chunk(self, plan: Plan, lo: int, hi: int) -> None:
        chunk = plan.shots.rows(lo, hi)
        if plan.engine == "qutip":
            self._qutip_chunk(plan, chunk, lo)
        elif plan.engine == "lindblad" or self.options["history"] or not plan.prepared_lost:
            loss = noise.image_loss(self.program, self.sources)
            found = fast.run(plan.basis, chunk, plan.jumps, plan.engine == "lindblad", loss, self.options["history"],
                             plan.rng)
            _merge(plan.merged, found.outcomes, found.states, np.arange(lo, lo + chunk.count))
            plan.history = plan.history or tuple(found.history)
        else:
            self._by_pattern(plan, chunk, lo)
        if not plan.stochastic:
            plan.done = hi

    def _by_pattern(self, plan: Plan, chunk: noise.Shots, lo: int) -> None:
        """Kets, split by atoms prepared lost: an atom that starts in |x⟩ stays there (imaging
        loss aside), so the shots where every atom was prepared are propagated on the states
        without a prepared loss (a basis several times smaller), the few others on the full
        basis, and the results embedded back."""
        loss = noise.image_loss(self.program, self.sources)
        patterns: dict[bool, list[int]] = {}
        for k, levels in enumerate(chunk.initial):
            patterns.setdefault(any(levels[i] == LOST for i in plan.prepared_lost), []).append(k)
        for some_lost, rows in sorted(patterns.items()):
            lost = {i for k in rows for i in plan.prepared_lost if chunk.initial[k][i] == LOST}
            sub = _pattern_basis(plan, (), lost)
            found = fast.run(sub, chunk.take(np.array(rows)), plan.jumps, False, loss, False, plan.rng)
            where = plan.basis.find(sub.keys)
            states = []
            for state in found.states:
                full = np.zeros(state.shape[:-1] + (plan.basis.size,), dtype=complex)
                full[..., where] = state
                states.append(full)
            _merge(plan.merged, found.outcomes, states, lo + np.array(rows))

    def _qutip_chunk(self, plan: Plan, chunk: noise.Shots, offset: int) -> None:
        c_ops = noise.collapse_operators(self.program, plan.model, self.sources)
        loss = noise.image_loss(self.program, self.sources)
        for k in range(chunk.count):
            initial = plan.basis.state(chunk.initial[k])
            draws = tuple(d[k] for d in chunk.image_draws)
            found, hist = propagate(chunk.shot_model(k), c_ops, self.options["history"], initial, loss, draws)
            plan.history = plan.history or tuple(hist)
            _merge(plan.merged, [b.outcomes for b in found], [b.state[None] for b in found], np.array([offset + k]))


def final_states(plan: Plan) -> tuple[tuple, tuple]:
    """(outcomes, per-branch (done, …) arrays) of a finished plan."""
    outcomes = tuple(sorted(plan.merged))
    return outcomes, tuple(_pad(plan.merged[o], plan.done) for o in outcomes)


def _pattern_basis(plan: Plan, pattern: tuple[int, ...], maybe: set[int] = frozenset()) -> Basis:
    """The kept states with the atoms of `pattern` prepared lost, those of `maybe` in |x⟩ or
    not, and the others not lost (unless imaging can lose them)."""
    levels = plan.basis.levels
    keep = np.ones(plan.basis.size, dtype=bool)
    for site in plan.prepared_lost:
        if site in pattern:
            keep &= levels[:, site] == LOST
        elif site not in plan.imaging_lost and site not in maybe:
            keep &= levels[:, site] != LOST
    return Basis(levels[keep], plan.basis.base, plan.basis.truncated_pairs, plan.basis.neglected_bound)


def _merge(merged: dict, outcomes, states, shots: np.ndarray) -> None:
    """Collect per-branch state arrays over chunks of shots: (shot indices, array)."""
    for labels, state in zip(outcomes, states):
        merged.setdefault(tuple(labels), []).append((shots, state))


def _pad(parts: list, total: int) -> np.ndarray:
    """One (shots, …) array per branch, with zeros for shots where the branch was dropped."""
    first = parts[0][1]
    out = np.zeros((total,) + first.shape[1:], dtype=complex)
    for shots, state in parts:
        inside = shots < total
        out[shots[inside]] = state[inside]
    return out


def _estimate(plan: Plan, density: bool) -> tuple[int, float]:
    """(bytes, floating-point operations) of a plan, from its states, segments and shots."""
    d, shots = plan.basis.size, plan.shots.count
    work = _pattern_basis(plan, ()).size if plan.prepared_lost and not density else d  # most shots
    imaged = sum(1 for seg in plan.model.segments if seg.image is not None for s in plan.model.sites
                 if s in seg.image.targets)
    branches = 2 ** min(imaged, 12)
    samples = sum(a.nbytes for a in plan.shots.couplings + plan.shots.shifts) + plan.shots.interactions.nbytes
    size = limits.run_bytes(d, shots, branches, density, SHOT_CHUNK, samples)
    if plan.engine == "qutip":  # dense H, and with collapse operators the dense Liouvillian and its exponential
        size += 16 * d * d * 4 + (16 * d**4 * 4 if plan.jumps else 0)
    flops = 0.0
    for seg, c in zip(plan.model.segments, plan.shots.couplings):
        if seg.image is not None or seg.duration_s <= 0:
            continue
        rows = c.shape[0]
        qubit_only = len(seg.couplings) > 1 and all(x.upper == 1 for x in seg.couplings)
        k = 2 if qubit_only or len(seg.couplings) == 1 else min(d, 2 ** len(seg.couplings)) if seg.couplings else 1
        sub = 1
        if plan.engine == "trajectories" and seg.couplings and not qubit_only:
            sub = max(1, math.ceil(np.abs(c[..., 0]).max(initial=0.0) * seg.duration_s / fast.KICK_ANGLE))
        if density:
            flops += rows * (d / k) ** 2 * 10 * k**4 + shots * d * d * k * 8
        else:  # exponentials of the blocks, then their action on every shot, branch and sub-step
            flops += rows * (work / k) * 30 * k**3 + shots * branches * work * (k + 6) * 8 * sub
    return size, flops


class Progress:
    """A one-line progress bar on stderr, for long Monte Carlo runs on a terminal."""

    def __init__(self, total: int, label: str = "shots"):
        self.total, self.label, self.live = total, label, sys.stderr.isatty()
        self.started = time.perf_counter()

    def update(self, done: int) -> None:
        if self.live:
            filled = int(30 * done / max(self.total, 1))
            sys.stderr.write(f"\r  {self.label} [{'#' * filled}{'.' * (30 - filled)}] {done}/{self.total}")
            sys.stderr.flush()

    def close(self) -> None:
        if self.live:
            sys.stderr.write("\n")
