"""Resource limits of a simulation, checked before anything large is allocated.

A cluster's cost grows with its kept states D (kets: D amplitudes per shot and
branch; density matrices: D²) and with the shots. Both are estimated from the
model before the basis, the noise samples or the states are allocated, and a run
above the limits is refused with what would help. The limits are in the table of
docs/simulation.md ("Simulation limits").
"""
from __future__ import annotations

import math

MEMORY_LIMIT = 4 * 2**30  # bytes one run may hold (states, samples, work space)
MAX_STATES = 2**20  # kept product states in one cluster
MAX_SHOTS = 10**6  # Monte Carlo shots of one run
WORK_FACTOR = 6  # working copies of a chunk's states while a segment is propagated
ESTIMATE_SECONDS = 3.0  # runs estimated above this print their estimate on a terminal
FLOPS = 0.7e9  # operations per second of the time estimate (calibrated on the GHZ benchmarks, one core)


class SimulationLimit(ValueError):
    """A run refused before allocating: too many states, shots or bytes."""


def check_shots(shots: int) -> None:
    if shots > MAX_SHOTS:
        raise SimulationLimit(f"{shots:,} shots are more than the limit of {MAX_SHOTS:,}; the Monte Carlo error "
                              f"falls as 1/sqrt(shots), so 10^5 shots already give about ±0.002 on a probability")


def too_many_states(sites: tuple[str, ...], count_so_far: int, placed: int, density: bool) -> SimulationLimit:
    """The refusal for a cluster whose basis passed MAX_STATES while being enumerated."""
    what = "at least" if placed < len(sites) else "exactly"
    return SimulationLimit(
        f"cluster {{{', '.join(sites)}}}: {len(sites)} atoms simulated together need {what} {count_so_far:,} "
        f"product states (limit {MAX_STATES:,}; {_bytes(16 * count_so_far * (count_so_far if density else 1))} "
        f"per shot). What would help: fewer atoms within one blockade radius (clusters are split where pair "
        f"shifts are weak), keep blockade truncation on, use the ket engine (--engine fast or trajectories) "
        f"rather than density matrices, or fewer Rydberg-driven atoms")


def run_bytes(states: int, shots: int, branches: int, density: bool, chunk: int, sample_bytes: int) -> int:
    """Bytes a cluster's run holds: final states of every shot and branch, the noise samples,
    and the working copies of one chunk of shots."""
    per_state = states * states if density else states
    stored = 16 * per_state * branches * max(shots, 1)
    work = 16 * per_state * branches * min(max(shots, 1), chunk) * WORK_FACTOR
    return stored + work + sample_bytes


def check_memory(total: int, parts: list[tuple[str, int, int, bool]], limit: int) -> None:
    """Refuse a run whose estimated bytes exceed `limit`; parts are (cluster, states, bytes, density)."""
    if total <= limit:
        return
    worst = max(parts, key=lambda p: p[2])
    help_ = ["fewer shots (--shots)"]
    if worst[3]:
        help_.insert(0, f"the ket engine (--engine trajectories: {_bytes(worst[2] // max(worst[1], 1))} instead)")
    help_ += ["fewer atoms within one blockade radius", "blockade truncation (on unless --no-truncation)"]
    raise SimulationLimit(f"the run would need about {_bytes(total)} (limit {_bytes(limit)}); the largest part is "
                          f"cluster {worst[0]} with {worst[1]:,} states "
                          f"({'density matrices' if worst[3] else 'kets'}, {_bytes(worst[2])}). "
                          f"What would help: {', '.join(help_)}")


def estimate_seconds(flops: float) -> float:
    return flops / FLOPS


def _bytes(n: float) -> str:
    for unit, size in (("TiB", 2**40), ("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if n >= size:
            return f"{n / size:.3g} {unit}"
    return f"{int(n)} B"


def describe(seconds: float, total_bytes: int) -> str:
    if seconds >= 120:
        when = f"{seconds / 60:.0f} min"
    else:
        when = f"{seconds:.2g} s" if seconds < 10 else f"{math.ceil(seconds)} s"
    return f"about {when} and {_bytes(total_bytes)}"
