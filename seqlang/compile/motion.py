"""Moving atoms: the move profile, site positions over time, and deflector ramps.

The one profile is the **minimum-jerk** path (Flash & Hogan, J. Neurosci. 5,
1688 (1985)): x(τ) = x0 + D·(10τ³ − 15τ⁴ + 6τ⁵), τ = t/T. Of all paths from
rest to rest it has the least integrated squared jerk, and its velocity and
acceleration are zero at both ends, so the tweezer's force on the atom never
steps: that keeps the motional excitation of the transported atom small
(common practice for tweezer transport). Peak velocity 15D/(8T) at τ = ½, peak
acceleration 10D/(√3·T²) at τ = ½ ∓ √3/6.

A deflector (acousto-optic, one axis) steers a tweezer by its RF frequency:
f = centre + scale·x. A move becomes one ramp per site and axis on that axis'
deflector port, sampled at the port's sample rate with sample times on the tick.
"""
from __future__ import annotations

import math

from ..program.model import Program
from .timeline import MOVE, Event, Timeline

AXES = ("x", "y", "z")
PEAK_VELOCITY = 15 / 8  # × D/T
PEAK_ACCELERATION = 10 / math.sqrt(3)  # × D/T²


def minimum_jerk(tau: float) -> float:
    """Fraction of the way done at τ = t/T (clamped to [0, 1])."""
    tau = min(1.0, max(0.0, tau))
    return tau**3 * (10 - 15 * tau + 6 * tau**2)


def minimum_jerk_velocity(tau: float) -> float:
    """d(fraction)/dτ: 30τ²(1 − τ)²."""
    return 30 * tau**2 * (1 - tau) ** 2 if 0 <= tau <= 1 else 0.0


def minimum_jerk_acceleration(tau: float) -> float:
    """d²(fraction)/dτ²: 60τ(1 − τ)(1 − 2τ)."""
    return 60 * tau * (1 - tau) * (1 - 2 * tau) if 0 <= tau <= 1 else 0.0


def moves(timeline: Timeline) -> list[Event]:
    return [e for e in timeline.events if e.kind == MOVE]


def positions_at(program: Program, timeline: Timeline, t: float) -> dict[str, tuple[float, float, float]]:
    """Every site's position at time t (moves done so far, the one under way partly)."""
    where = {name: site.position_m for name, site in program.sites.items()}
    for move in moves(timeline):
        done = minimum_jerk((t - move.start_s) / move.duration_s) if move.duration_s else float(t >= move.start_s)
        for name in move.targets:
            where[name] = tuple(x + done * d for x, d in zip(where[name], move.displacement_m))
    return where


def position_at(program: Program, timeline: Timeline, name: str, t: float) -> tuple[float, float, float]:
    """One site's position at time t (as `positions_at`, without building every site's)."""
    where = program.sites[name].position_m
    for move in moves(timeline):
        if name in move.targets:
            done = minimum_jerk((t - move.start_s) / move.duration_s) if move.duration_s else float(t >= move.start_s)
            where = tuple(x + done * d for x, d in zip(where, move.displacement_m))
    return where


def moving_at(timeline: Timeline, start: float, end: float) -> set[str]:
    """Sites that are being moved at some time within [start, end)."""
    return {s for m in moves(timeline) if m.start_s < end and start < m.end_s for s in m.targets}


def deflector(program: Program, species: str, axis: str):
    """The deflector port that steers this species along this axis, or None."""
    for port in program.rig.ports.values():
        if port.kind == "deflector" and port.extra.get("axis") == axis \
                and port.extra.get("steers") in (None, species):
            return port
    return None


def ramp_samples(start_hz: float, end_hz: float, duration_s: float, sample_rate_hz: float,
                 tick_s: float) -> tuple[list[float], list[float]]:
    """(times from the ramp start, frequencies) of a minimum-jerk ramp.

    Sample k is played at round(k/rate/tick) ticks, and its frequency is the
    profile at that played time, so the table holds what the deflector does.
    The last sample sits exactly at the end (the final frequency).
    """
    count = max(1, math.ceil(duration_s * sample_rate_hz))
    end_ticks = round(duration_s / tick_s)
    times = sorted({min(end_ticks, round(k / sample_rate_hz / tick_s)) for k in range(count)} | {end_ticks})
    seconds = [k * tick_s for k in times]
    freqs = [start_hz + (end_hz - start_hz) * minimum_jerk(t / duration_s) for t in seconds]
    return seconds, freqs


def peak_speed(move: Event) -> tuple[float, float]:
    """(peak velocity m/s, peak acceleration m/s²) of a move along its path."""
    distance = math.sqrt(sum(d * d for d in move.displacement_m))
    return PEAK_VELOCITY * distance / move.duration_s, PEAK_ACCELERATION * distance / move.duration_s**2


def closest_approaches(program: Program, timeline: Timeline, limit: float, samples: int) -> dict[int, tuple]:
    """For each move (by position in `moves(timeline)`) that brings one of its sites closer than
    `limit` to another site: (site, other, distance) at the first of `samples` + 1 sample times.

    Vectorised over sites and sample times: positions start from the sites settled by the
    moves that ended before this one started, plus the partial progress of the moves that
    overlap it, so thousands of moves (a rearrangement) are checked in well under a second.
    """
    all_moves = moves(timeline)
    if not all_moves:
        return {}
    import numpy as np
    names = list(program.sites)
    where = {n: k for k, n in enumerate(names)}
    settled = np.array([program.sites[n].position_m for n in names], dtype=float).reshape(-1, 3)
    order = sorted(range(len(all_moves)), key=lambda k: (all_moves[k].start_s, k))
    by_end = sorted(range(len(all_moves)), key=lambda k: (all_moves[k].end_s, k))
    done, out, taus = 0, {}, np.linspace(0.0, 1.0, samples + 1)
    for k in order:
        move = all_moves[k]
        while done < len(by_end) and all_moves[by_end[done]].end_s <= move.start_s:
            m = all_moves[by_end[done]]
            settled[[where[s] for s in m.targets]] += m.displacement_m
            done += 1
        pending = set(by_end[done:])
        times = move.start_s + move.duration_s * taus
        overlapping = [all_moves[j] for j in sorted(pending) if all_moves[j].start_s < move.end_s or j == k]
        moving = sorted({where[s] for m in overlapping for s in m.targets})
        near = _near_path(settled, [where[s] for s in move.targets], move.displacement_m, limit)
        keep = np.array(sorted(set(moving) | set(near.tolist())), dtype=int)
        local = {int(site): n for n, site in enumerate(keep)}
        positions = np.repeat(settled[keep][None], len(times), axis=0)
        for m in overlapping:
            fraction = np.array([minimum_jerk((t - m.start_s) / m.duration_s) if m.duration_s
                                 else float(t >= m.start_s) for t in times])
            positions[:, [local[where[s]] for s in m.targets]] += fraction[:, None, None] * np.asarray(m.displacement_m)
        found = _first_too_close(positions, [local[where[s]] for s in move.targets], limit)
        if found is not None:
            found = (int(keep[found[0]]), int(keep[found[1]]), found[2])
        if found is not None:
            a, b, distance = found
            out[k] = (names[a], names[b], distance)
    return out


def _near_path(settled, targets: list[int], displacement, limit: float):
    """Sites at rest within `limit` of the straight path of a moved site (a move is straight)."""
    import numpy as np
    d = np.asarray(displacement, dtype=float)
    length2 = float(d @ d)
    near = []
    for a in targets:
        rel = settled - settled[a]
        tau = np.clip(rel @ d / length2, 0.0, 1.0) if length2 else np.zeros(len(settled))
        gap = np.linalg.norm(rel - tau[:, None] * d, axis=1)
        near.append(np.nonzero(gap < limit * (1 + 1e-9) + 1e-12)[0])
    return np.unique(np.concatenate(near)) if near else np.zeros(0, dtype=int)


def _first_too_close(positions, targets: list[int], limit: float):
    """(moved site, other site, distance) of the first sample, target and site closer than `limit`."""
    import numpy as np
    gaps = np.linalg.norm(positions[:, targets, None, :] - positions[:, None, :, :], axis=-1)
    for j, a in enumerate(targets):
        gaps[:, j, a] = np.inf
    close = gaps < limit
    if not close.any():
        return None
    sample, j, b = (int(x) for x in np.argwhere(close)[0])
    return targets[j], b, float(gaps[sample, j, b])
