"""Simulation engines against a plain loop over qutip.mesolve, side by side in one run (not a test).

Run:   python benchmarks/bench_engines.py            # full shot counts
       python benchmarks/bench_engines.py --quick    # fewer shots, for a first look
       python benchmarks/bench_engines.py --only 1,3 # some benchmarks only

Programs are in benchmarks/programs/ (rig `bench.rig`, the invented Millpond lab):

1. cz_pair.seq: two-atom two-pulse global CZ (Levine et al., PRL 123, 170503 (2019)),
   1000 quasi-static shots of intensity noise and Doppler shifts, Rydberg decay to
   loss. Target: seqlang at least 100x faster than the baseline.
2. blockade5.seq: five atoms within one blockade radius, a collective 2pi pulse,
   Rydberg decay to loss (no sampled noise: one shot). Target: at least 500x.
   The baseline's one mesolve run takes tens of minutes (the pair shifts of up to
   280 MHz must be followed on a 4^10-dimensional Liouvillian), so it solves the
   first 1% of every segment and its time is scaled by 100 (printed as such).
3. cz_pair_cs.seq: the same CZ on caesium, whose Rydberg decay partly returns into
   the qubit states (species key `decay_to_qubit`), so it needs the Lindblad engine;
   200 shots of intensity noise. Target: at least 10x.
4. blockade10.seq: ten atoms within one blockade radius, a collective 2pi pulse with
   decay. seqlang alone (goal: under 10 s and 2 GB); the baseline would carry a
   4^10 x 4^10 density matrix (16 TB) and is not run.

5. ghz5.seq: a five-atom GHZ state (one control, four targets, all in one blockade
   radius) with every noise source of the demo rig (rig `noisy.rig`), 1000 shots.
   Goal: seqlang under 10 s, printed beside the Lindblad engine where it runs.
6. ghz6.seq: the same with six atoms. Goal: under 30 s.

Baselines (what a competent QuTiP user would write for the same physics, each built
from seqlang's model and per-shot noise samples so that the physics is the same):

* ``mesolve``: qutip.mesolve segment by segment on the 4-level density matrix;
* ``sesolve``: qutip.sesolve of kets on the 3-level model per atom (0, 1, r) with the
  non-Hermitian H_eff = H − (i/2)ΣΓ|r⟩⟨r| — exact for decay to loss; not run where
  dissipation returns into the qubit (benchmark 3) or dephases (5, 6);
* ``mcsolve``: qutip.mcsolve quantum-jump trajectories on the 4-level model, one
  trajectory per noise sample (200 trajectories for the one-shot benchmarks).

Each baseline is first timed on a subset of the shots; when the full run is then
expected to take under FULL_RUN_SECONDS it runs in full, else the time is
extrapolated linearly (the printout says which). Every seqlang ratio is given
against the strongest (fastest) baseline of the benchmark. The fidelity
cross-check compares every baseline that reports a fidelity with seqlang at the
same shots and seed (mcsolve: within its own Monte Carlo error).

What is measured, for every engine that `seqlang.simulate(..., engine=E)` accepts
("auto", "fast", "lindblad", "qutip"; without the `engine=` option, today's single
path): wall time of one simulate() call on a loaded sequence (best of three when under 5 s), with the pair shifts
V = C6/R^6 computed beforehand and passed in (no atomic-data lookups are timed);
its peak memory (tracemalloc, a second run); the fidelity it reports. The baseline
builds the same model with seqlang's model and noise functions and then loops over
shots and segments calling qutip.mesolve in each segment's drive frame, as the
reference path does; it is timed the same way. Loops whose cost is linear in the
shot count (the baseline, the "qutip" engine) run a subset of the shots and are
extrapolated linearly; the printout says so. The cross-check compares each engine's
fidelity with the baseline's at the same shots and seed (same noise samples).

tracemalloc counts what Python and numpy allocate (QuTiP's and scipy's arrays
included), not BLAS work space; the process's peak RSS is printed at the end.
"""
from __future__ import annotations

import argparse
import dataclasses
import math
import os
import resource
import sys
import time
import tracemalloc
from dataclasses import dataclass

import numpy as np
import seqlang
from seqlang.sim import noise, observables
from seqlang.sim.model import build_model, hamiltonian, pair_interactions_hz
from seqlang.sim.solve import detuning_frame

PROGRAMS = os.path.join(os.path.dirname(os.path.abspath(__file__)), "programs")
ENGINES = ("auto", "fast", "lindblad", "qutip")
LOOP_ENGINES = ("qutip", None)  # shot-by-shot loops: time a subset, extrapolate (None: no engine= option)
SEED = 1
# What an engine raises when it refuses a model or runs out of room: printed as a result.
REPORTED_ERRORS = (ValueError, MemoryError, NotImplementedError, RuntimeError)
MIB = 2**20
# The baseline integrates in microseconds (H in rad/us), with QuTiP's default tolerances.
US = 1e-6
MESOLVE_OPTIONS = {"atol": 1e-8, "rtol": 1e-6, "nsteps": 10**7, "store_states": False,
                   "store_final_state": True, "progress_bar": False}


@dataclass(frozen=True)
class Benchmark:
    """One program, its noise, shot counts and target."""

    number: int
    title: str
    program: str
    noise: str
    shots: tuple[int, int]  # (full, --quick)
    loop_shots: tuple[int, int]  # shots actually run by loops (full, --quick); the rest extrapolated
    engines: tuple[str, ...]
    target_ratio: float | None = None  # baseline / seqlang
    goal_seconds: float | None = None
    goal_mib: float | None = None
    baseline: bool = True
    baseline_fraction: float | None = None  # baseline solves this fraction of every segment, extrapolated
    note: str = ""
    baselines: tuple[str, ...] = ("mesolve",)  # which QuTiP baselines run
    baseline_shots: tuple[int, int] = (20, 3)  # sesolve/mcsolve shots timed first (full, --quick)


ALL_NOISE = "all"
BENCHMARKS = (
    Benchmark(1, "two-atom two-pulse global CZ (Levine et al., PRL 123, 170503 (2019))", "cz_pair.seq",
              "decay,intensity,doppler", (1000, 100), (20, 5), ENGINES, target_ratio=100,
              baselines=("mesolve", "sesolve", "mcsolve")),
    Benchmark(2, "five atoms in one blockade radius, collective 2pi pulse", "blockade5.seq",
              "decay", (1, 1), (1, 1), ENGINES, target_ratio=500, baseline_fraction=0.01,
              baselines=("mesolve", "sesolve", "mcsolve"), baseline_shots=(10, 2)),
    Benchmark(3, "two-atom CZ on caesium, decay partly back into the qubit", "cz_pair_cs.seq",
              "decay,intensity", (200, 40), (20, 5), ("auto", "lindblad", "qutip", "fast"), target_ratio=10,
              baselines=("mesolve", "mcsolve")),
    Benchmark(4, "ten atoms in one blockade radius, collective 2pi pulse", "blockade10.seq",
              "decay", (1, 1), (1, 1), ("auto", "fast"), goal_seconds=10, goal_mib=2048, baseline=False,
              note="baselines not run: mesolve would carry a 4^10 x 4^10 density matrix (16 TB), sesolve and "
                   "mcsolve a dense 4^10-level Hamiltonian (16 TB)"),
    Benchmark(5, "five-atom GHZ state, every noise source", "ghz5.seq", ALL_NOISE, (1000, 100), (1, 1),
              ("auto", "lindblad"), goal_seconds=10, baselines=("mcsolve",), baseline_shots=(2, 1)),
    Benchmark(6, "six-atom GHZ state, every noise source", "ghz6.seq", ALL_NOISE, (1000, 100), (1, 1),
              ("auto",), goal_seconds=30, baselines=("mcsolve",), baseline_shots=(1, 1)),
)
FULL_RUN_SECONDS = 180  # a baseline expected to finish within this runs in full
TRAJECTORIES_FOR_ONE_SHOT = 200  # mcsolve trajectories standing in for a deterministic run


@dataclass
class Measurement:
    """One timed run (time and memory of all `shots`, extrapolated when `ran` < `shots`)."""

    label: str
    seconds: float
    ran: int
    shots: int
    peak_bytes: int
    fidelity: float
    fidelity_error: float | None = None
    engine_used: str = ""

    @property
    def extrapolated(self) -> bool:
        return self.ran < self.shots


# ---- the baseline: a plain loop over qutip.mesolve -------------------------------------------
def mesolve_baseline(sequence, interactions_hz: dict, sources: tuple[str, ...], shots: int,
                     seed: int, fraction: float | None = None) -> np.ndarray:
    """Shot-averaged final density matrix: for each shot, qutip.mesolve segment by segment.

    The model, its per-shot perturbations and the collapse operators come from seqlang
    (the only seqlang code used, so the two compute the same physics); each segment is
    solved in its drive frame and rotated back, as seqlang's reference path does.
    """
    import qutip
    program = sequence.program
    model = build_model(program, sequence.played, tuple(program.sites), interactions_hz)
    dims = [[model.dim] * model.size] * 2
    c_ops = [_sparse_qobj(c * math.sqrt(US), dims) for c in noise.collapse_operators(program, model, sources)]
    total = 0
    for shot_model, psi in _shots(program, model, sources, shots, np.random.default_rng(seed)):
        rho = np.outer(psi, psi.conj())
        for segment in shot_model.segments:
            if fraction:
                segment = dataclasses.replace(segment, duration_s=segment.duration_s * fraction)
            rho = _mesolve_segment(qutip, shot_model, segment, rho, c_ops, dims)
        total = total + rho
    return total / shots


def _shots(program, model, sources, shots: int, rng):
    """(model, initial ket) per shot, drawn in the order seqlang's simulate() draws them."""
    model = noise.prepare(program, model, sources)
    drawn = (noise.sample(program, model, sources, noise.draw(model, shots, rng)) if noise.is_sampled(sources)
             else noise.nominal_shots(model))
    for k in range(shots):
        row = k if drawn.count > 1 else 0
        yield drawn.shot_model(row), _product_ket(model, drawn.initial[row])


def _product_ket(model, levels) -> np.ndarray:
    psi = np.zeros(model.dim**model.size, dtype=complex)
    psi[int(np.ravel_multi_index(levels, [model.dim] * model.size))] = 1.0
    return psi


def _mesolve_segment(qutip, model, segment, rho: np.ndarray, c_ops: list, dims) -> np.ndarray:
    """ρ(t₁) = e^{iDt₁} mesolve(H_D, e^{−iDt₀} ρ(t₀) e^{iDt₀}) e^{−iDt₁} (D: the drive frame)."""
    if segment.image is not None:
        raise NotImplementedError("the baseline does not image; the benchmark programs do not either")
    if segment.duration_s <= 0:
        return rho
    frame = detuning_frame(model, segment)
    t0, t1 = segment.start_s, segment.start_s + segment.duration_s
    rho = _rotate(rho, np.exp(-1j * frame * t0))
    ops = c_ops + _scattering_ops(model, segment, dims)
    h = _sparse_qobj(hamiltonian(model, segment) * US, dims)
    out = qutip.mesolve(h, qutip.Qobj(rho, dims=dims), [0.0, segment.duration_s / US], ops,
                        options=MESOLVE_OPTIONS)
    return _rotate(out.final_state.full(), np.exp(1j * frame * t1))


def _scattering_ops(model, segment, dims) -> list:
    """Loss from light-shifted levels while a pulse plays (present only with scattering noise)."""
    from seqlang.sim.model import LOST, embed
    out = []
    for shift in segment.shifts:
        if getattr(shift, "loss_rate", 0.0) > 0:
            jump = np.zeros((model.dim, model.dim), dtype=complex)
            jump[LOST, shift.level] = math.sqrt(shift.loss_rate * US)
            out.append(_sparse_qobj(embed(jump, shift.site, model.size), dims))
    return out


def _rotate(rho: np.ndarray, phases: np.ndarray) -> np.ndarray:
    return phases[:, None] * rho * phases.conj()[None, :]


def _sparse_qobj(matrix: np.ndarray, dims):
    """CSR, so that mesolve's Liouvillian stays sparse (dense it would be (4^n)^4 entries)."""
    import qutip
    import scipy.sparse
    return qutip.Qobj(scipy.sparse.csr_matrix(matrix), dims=dims)


def baseline_fidelity(sequence, rho: np.ndarray) -> float:
    """The first `expect`'s fidelity from a full density matrix, with seqlang's definition."""
    program = sequence.program
    expect = program.expects[0]
    sites = list(program.sites)
    reduced = observables.partial_trace(rho, len(sites), [sites.index(s) for s in expect.sites])
    return observables.summarize(reduced, len(expect.sites), expect.state, expect.is_ket)["fidelity"]


# ---- the ket baselines: sesolve (non-Hermitian, 3 levels) and mcsolve (trajectories) ------------
SOLVER_OPTIONS = {"atol": 1e-8, "rtol": 1e-6, "nsteps": 10**7, "store_states": False,
                  "store_final_state": True, "progress_bar": False}


def ket_baseline(kind: str, sequence, interactions_hz: dict, sources: tuple[str, ...], shots: int,
                 seed: int) -> tuple[np.ndarray, list[float]]:
    """(mean 4^n density matrix, per-shot fidelities) from qutip.sesolve or qutip.mcsolve.

    sesolve: kets on the states with no atom lost, H_eff = H − (i/2)ΣΓ L†L for the jumps to
    loss (norm lost = loss). mcsolve: one quantum-jump trajectory per noise sample on all 4^n
    levels. Segments are solved in their drive frames and rotated back, as for mesolve.
    """
    import qutip
    from seqlang.sim.model import LOST
    program = sequence.program
    model = build_model(program, sequence.played, tuple(program.sites), interactions_hz)
    levels = np.indices([model.dim] * model.size).reshape(model.size, -1)
    keep = np.nonzero((levels != LOST).all(axis=0))[0] if kind == "sesolve" else np.arange(model.dim**model.size)
    jumps = noise.jumps(program, noise.prepare(program, model, sources), sources)
    c_ops = noise.collapse_operators(program, model, sources)
    total, fidelities, rng_traj = 0, [], np.random.default_rng(seed)
    count = shots if noise.is_sampled(sources) else 1
    samples = list(_shots(program, model, sources, count, np.random.default_rng(seed)))
    for k in range(shots):
        shot_model, psi = samples[k % count]
        psi = psi[keep]
        for segment in shot_model.segments:
            psi = _ket_segment(qutip, kind, shot_model, segment, psi, keep, jumps, c_ops, rng_traj)
        full = np.zeros(model.dim**model.size, dtype=complex)
        full[keep] = psi
        rho = np.outer(full, full.conj())
        total = total + rho
        fidelities.append(baseline_fidelity(sequence, rho))
    return total / shots, fidelities


def _ket_segment(qutip, kind, model, segment, psi, keep, jumps, c_ops, rng) -> np.ndarray:
    if segment.image is not None:
        raise NotImplementedError("the baselines do not image; the benchmark programs do not either")
    if segment.duration_s <= 0:
        return psi
    from seqlang.sim.model import embed, projector
    frame = detuning_frame(model, segment)[keep]
    t0, t1 = segment.start_s, segment.start_s + segment.duration_s
    psi = np.exp(-1j * frame * t0) * psi
    h = hamiltonian(model, segment)
    if kind == "sesolve":
        loss = sum(j.rate * np.real(np.diag(embed(projector(j.source, model.dim), j.site, model.size)))
                   for j in jumps if j.target == noise.LOST)
        for shift in segment.shifts:
            if getattr(shift, "loss_rate", 0.0) > 0:
                loss = loss + shift.loss_rate * np.real(np.diag(embed(projector(shift.level, model.dim),
                                                                      shift.site, model.size)))
        h = h - 0.5j * np.diag(np.broadcast_to(loss, (h.shape[0],)))
        hq = qutip.Qobj(h[np.ix_(keep, keep)] * US)
        out = qutip.sesolve(hq, qutip.Qobj(psi), [0.0, segment.duration_s / US],
                            options={**SOLVER_OPTIONS, "normalize_output": False})
        psi = out.final_state.full().ravel()
    else:
        dims = [[model.dim] * model.size] * 2
        ops = [_sparse_qobj(c * math.sqrt(US), dims) for c in c_ops] + _scattering_ops(model, segment, dims)
        ket = qutip.Qobj(psi, dims=[[model.dim] * model.size, [1] * model.size])
        out = qutip.mcsolve(_sparse_qobj(h * US, dims), ket, [0.0, segment.duration_s / US], ops, ntraj=1,
                            seeds=int(rng.integers(2**31)), options={**SOLVER_OPTIONS, "keep_runs_results": True})
        psi = out.runs_final_states[0].full().ravel()
    return np.exp(1j * frame * t1) * psi


def measure_ket_baseline(kind: str, sequence, interactions, bench: Benchmark, shots: int, quick: bool):
    """Time the baseline on a subset, then in full when that is expected to take under FULL_RUN_SECONDS."""
    sources = noise.parse_sources(bench.noise)
    if kind == "mcsolve" and shots == 1:
        shots = TRAJECTORIES_FOR_ONE_SHOT
    subset = min(shots, bench.baseline_shots[quick])
    seconds, (rho, fids) = timed(lambda: ket_baseline(kind, sequence, interactions, sources, subset, SEED))
    ran = subset
    if not quick and subset < shots and seconds * shots / subset < FULL_RUN_SECONDS:
        seconds, (rho, fids) = timed(lambda: ket_baseline(kind, sequence, interactions, sources, shots, SEED))
        ran = shots
    peak = peak_memory(lambda: ket_baseline(kind, sequence, interactions, sources, 1, SEED))
    error = float(np.std(fids, ddof=1) / math.sqrt(len(fids))) if len(fids) > 1 and kind == "mcsolve" else None
    label = f"qutip.{kind} loop" + (" (3-level, H_eff)" if kind == "sesolve" else " (trajectories)")
    return Measurement(label, seconds * shots / ran, ran, shots, peak, baseline_fidelity(sequence, rho), error)


# ---- seqlang ----------------------------------------------------------------------------------
def engine_option_accepted(path: str) -> bool:
    """True once simulate() takes `engine=` (before that it raises TypeError on unknown options)."""
    try:
        seqlang.simulate(path, engine="auto", noise="off", shots=1)
    except TypeError:
        return False
    return True


def run_seqlang(sequence, interactions_hz: dict, bench: Benchmark, engine: str | None, shots: int):
    options = {"interactions_hz": interactions_hz, "noise": bench.noise, "shots": shots, "seed": SEED}
    if engine is not None:
        options["engine"] = engine
    return seqlang.simulate(sequence, **options)


def not_feasible(engine: str | None, atoms: int, density: bool) -> str | None:
    """Why an engine is not run on this many atoms, or None."""
    if engine in ("qutip", None) and atoms > 3:
        space = 4 ** (2 * atoms) if density else 4**atoms
        return (f"not run: the QuTiP reference path exponentiates dense {space:,} x {space:,} matrices "
                f"({16 * space**2 / 2**40:,.0f} TiB)")
    if engine == "lindblad" and atoms > 4:
        return ("not run: the Lindblad engine's linked blocks of density-matrix elements reach thousands "
                "of elements here (minutes); it is meant for up to about four atoms per cluster")
    return None


# ---- timing and memory ------------------------------------------------------------------------
REPEATS = 3  # short seqlang runs are timed best of three: first-call costs and load spikes are not the engine
REPEAT_BELOW_S = 5.0


def timed(call):
    start = time.perf_counter()
    value = call()
    return time.perf_counter() - start, value


def peak_memory(call) -> int:
    """Peak bytes traced while `call` runs."""
    tracemalloc.start()
    try:
        call()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def measure_seqlang(sequence, interactions, bench: Benchmark, engine, shots: int, loop_shots: int) -> Measurement:
    ran = loop_shots if engine in LOOP_ENGINES else shots
    seconds, result = timed(lambda: run_seqlang(sequence, interactions, bench, engine, ran))
    for _ in range(REPEATS - 1 if seconds < REPEAT_BELOW_S else 0):  # best of a few, as timeit does
        seconds = min(seconds, timed(lambda: run_seqlang(sequence, interactions, bench, engine, ran))[0])
    memory_shots = min(ran, 2) if engine in LOOP_ENGINES else ran  # a loop's peak does not grow with shots
    peak = peak_memory(lambda: run_seqlang(sequence, interactions, bench, engine, memory_shots))
    expectation = result.expectations[0]
    label = engine if engine is not None else "simulate() (today's path)"
    return Measurement(label, seconds * shots / ran, ran, shots, peak, expectation["fidelity"],
                       expectation.get("fidelity_error"), getattr(result, "engine", "qutip"))


def measure_baseline(sequence, interactions, bench: Benchmark, shots: int, loop_shots: int) -> Measurement:
    """The mesolve loop. With `baseline_fraction` f it solves only the first f of every segment and
    its time is scaled by 1/f (the adaptive solver's steps grow linearly with the time solved for
    these oscillating, stiff problems): the 5-atom Rydberg segment alone runs for tens of minutes."""
    sources = noise.parse_sources(bench.noise)
    part = bench.baseline_fraction
    seconds, rho = timed(lambda: mesolve_baseline(sequence, interactions, sources, loop_shots, SEED, part))
    peak = peak_memory(lambda: mesolve_baseline(sequence, interactions, sources, min(loop_shots, 2), SEED, part))
    label = "qutip.mesolve loop" + (f" ({part:.0%} of each segment, x{1 / part:.0f})" if part else "")
    fidelity = math.nan if part else baseline_fidelity(sequence, rho)
    return Measurement(label, seconds * shots / loop_shots / (part or 1), loop_shots, shots, peak, fidelity)


def cross_check(sequence, interactions, bench: Benchmark, measured: Measurement, engine, baseline: Measurement):
    """|F_engine − F_baseline| at the baseline's shots and seed (the same noise samples)."""
    if measured.ran == baseline.ran:
        return abs(measured.fidelity - baseline.fidelity)
    result = run_seqlang(sequence, interactions, bench, engine, baseline.ran)
    return abs(result.expectations[0]["fidelity"] - baseline.fidelity)


# ---- one benchmark ----------------------------------------------------------------------------
def run_benchmark(bench: Benchmark, directory: str, quick: bool, engines_exist: bool) -> None:
    shots, loop_shots = bench.shots[quick], bench.loop_shots[quick]
    sequence = seqlang.load(os.path.join(directory, bench.program))
    interactions = pair_interactions_hz(sequence.program, tuple(sequence.program.sites))
    atoms = len(sequence.program.sites)
    print(f"\n{bench.number}. {bench.title}")
    print(f"   {bench.program}: {atoms} atoms, noise {bench.noise}, {shots} shot(s), seed {SEED}")
    warm_up(sequence, interactions, bench, engines_exist, atoms)
    baselines = []
    if bench.baseline:
        for kind in bench.baselines:
            reason = baseline_not_feasible(kind, atoms, bench)
            if reason:
                print(f"   qutip.{kind:<21} {reason}")
                continue
            try:
                m = (measure_baseline(sequence, interactions, bench, shots, loop_shots) if kind == "mesolve"
                     else measure_ket_baseline(kind, sequence, interactions, bench, shots, quick))
            except REPORTED_ERRORS as exc:
                print(f"   qutip.{kind:<21} failed: {type(exc).__name__}: {exc}")
                continue
            print_measurement(m, None)
            baselines.append(m)
    else:
        print(f"   {bench.note}")
    baseline = min(baselines, key=lambda m: m.seconds) if baselines else None
    if baseline is not None:
        print(f"   strongest baseline: {baseline.label}; every ratio below is against it")
    differences = {}
    for engine in (bench.engines if engines_exist else (None,)):
        reason = not_feasible(engine, atoms, density=True)
        if reason:
            print(f"   {engine or 'simulate()':<26} {reason}")
            continue
        try:
            measured = measure_seqlang(sequence, interactions, bench, engine, shots, loop_shots)
        except REPORTED_ERRORS as exc:
            print(f"   {engine or 'simulate()':<26} failed: {type(exc).__name__}: {exc}")
            continue
        print_measurement(measured, baseline)
        for other in baselines:
            if math.isnan(other.fidelity):
                continue
            differences[(measured.label, other.label)] = cross_check(sequence, interactions, bench, measured,
                                                                     engine, other)
        judge(bench, measured, baseline)
    for other in baselines:
        found = {k: v for k, v in differences.items() if k[1] == other.label}
        if found:
            worst = max(found, key=found.get)
            spread = f" (its Monte Carlo error {other.fidelity_error:.1e})" if other.fidelity_error else ""
            print(f"   cross-check vs {other.label}: largest |F_seqlang - F_baseline| = {found[worst]:.2e} "
                  f"({worst[0]}), at {other.ran} shot(s), seed {SEED}{spread}")


def baseline_not_feasible(kind: str, atoms: int, bench: Benchmark) -> str | None:
    sources = set(noise.parse_sources(bench.noise))
    if kind == "sesolve" and sources & {"dephasing"} or kind == "sesolve" and bench.number == 3:
        return "not run: H_eff kets cannot describe dephasing or decay back into the qubit (not the same physics)"
    if kind == "mesolve" and atoms > 5:
        return f"not run: a 4^{atoms} x 4^{atoms} density matrix"
    return None


def warm_up(sequence, interactions, bench: Benchmark, engines_exist: bool, atoms: int) -> None:
    """Imports, atomic-data caches and first-call costs, outside the timings (small models only)."""
    if atoms > 5:
        return
    for engine in (bench.engines if engines_exist else (None,)):
        if not_feasible(engine, atoms, density=True):
            continue
        try:
            run_seqlang(sequence, interactions, bench, engine, 2 if bench.shots[0] > 1 else 1)
        except REPORTED_ERRORS:
            continue  # reported when timed


def print_measurement(m: Measurement, baseline: Measurement | None) -> None:
    used = f" -> {m.engine_used}" if m.engine_used and m.engine_used != m.label else ""
    ratio = f"  ratio {baseline.seconds / m.seconds:8.1f}x" if baseline else ""
    error = f" +- {m.fidelity_error:.1e}" if m.fidelity_error else ""
    extrapolated = f"  (extrapolated from {m.ran} of {m.shots} shots)" if m.extrapolated else ""
    print(f"   {m.label + used:<36} {m.seconds:10.3f} s{ratio}  peak {m.peak_bytes / MIB:8.1f} MiB"
          f"  F = {m.fidelity:.6f}{error}{extrapolated}")


def judge(bench: Benchmark, m: Measurement, baseline: Measurement | None) -> None:
    """Say whether the engine users get by default (auto, or today's path) meets the target."""
    if m.label not in ("auto", "simulate() (today's path)"):
        return
    verdicts = []
    if bench.target_ratio and baseline:
        ratio = baseline.seconds / m.seconds
        verdicts.append(f"target >= {bench.target_ratio:g}x: {'met' if ratio >= bench.target_ratio else 'not met'}")
    if bench.goal_seconds:
        verdicts.append(f"goal < {bench.goal_seconds:g} s: {'met' if m.seconds < bench.goal_seconds else 'not met'}")
    if bench.goal_mib:
        small = m.peak_bytes / MIB < bench.goal_mib
        verdicts.append(f"goal < {bench.goal_mib / 1024:g} GB: {'met' if small else 'not met'}")
    if verdicts:
        print(f"   {m.label}: " + "; ".join(verdicts))


# ---- programs and the rig ---------------------------------------------------------------------
def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer shots")
    parser.add_argument("--only", default="", help="comma list of benchmark numbers, e.g. 1,3")
    args = parser.parse_args(argv)
    chosen = {int(n) for n in args.only.split(",") if n.strip()} or {b.number for b in BENCHMARKS}
    engines_exist = engine_option_accepted(os.path.join(PROGRAMS, "cz_pair.seq"))
    print("seqlang engine benchmarks" + (" (--quick)" if args.quick else ""))
    print("engines: " + (", ".join(ENGINES) if engines_exist
                         else "simulate() has no engine= option yet; timing today's single path"))
    for bench in BENCHMARKS:
        if bench.number in chosen:
            run_benchmark(bench, PROGRAMS, args.quick, engines_exist)
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"\npeak RSS of this process: {rss:.0f} MiB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
