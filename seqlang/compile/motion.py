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

import bisect
import heapq
import math
from collections import defaultdict

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
        done = _done(move, t)
        for name in move.targets:
            where[name] = tuple(x + done * d for x, d in zip(where[name], move.displacement_m))
    return where


def _done(move: Event, t: float) -> float:
    """Fraction of a move done at time t."""
    return minimum_jerk((t - move.start_s) / move.duration_s) if move.duration_s else float(t >= move.start_s)


def _surely_done(move: Event) -> float:
    """The earliest time from which `_done(move, t)` is exactly 1 (the clamp of the profile)."""
    if not move.duration_s:
        return move.start_s
    t = move.start_s + move.duration_s
    while (t - move.start_s) / move.duration_s < 1.0:  # a float step or two past the end at most
        t = math.nextafter(t, math.inf)
    return t


def _has_negative_zero(position: tuple[float, ...]) -> bool:
    return any(x == 0.0 and math.copysign(1.0, x) < 0 for x in position)


class SitePaths:
    """Where sites are over time, from each site's own moves: built once, then positions at
    many times cost a binary search and the moves under way, not a scan of the timeline.

    Same numbers as :func:`positions_at` (a scan of every move), float for float: the moves done by then are added
    in the same order (their sums kept per prefix), the ones under way by the profile, and
    the ones not begun add nothing (exactly: x + 0·d = x, for x other than -0).
    """

    def __init__(self, program: Program, timeline: Timeline):
        self._program = program
        self._moves: dict[str, list[Event]] = defaultdict(list)
        for move in moves(timeline):  # in start order
            for name in dict.fromkeys(move.targets):
                self._moves[name].append(move)
        self._starts = {name: [m.start_s for m in of_site] for name, of_site in self._moves.items()}
        self._prefixes = {name: self._prefix_sums(name, of_site) for name, of_site in self._moves.items()}

    def _prefix_sums(self, name: str, of_site: list[Event]) -> tuple[list[float], list[tuple]]:
        """(time from which the first k moves are all done, position after them) for k = 0, 1, ..."""
        done_from, after = [-math.inf], [self._program.sites[name].position_m]
        for move in of_site:
            done_from.append(max(done_from[-1], _surely_done(move)))
            after.append(tuple(x + 1.0 * d for x, d in zip(after[-1], move.displacement_m)))
        return done_from, after

    def moves_of(self, name: str) -> list[Event]:
        """The moves of one site, in start order."""
        return self._moves.get(name, [])

    def position(self, name: str, t: float) -> tuple[float, float, float]:
        """The site's position at time t."""
        of_site = self._moves.get(name)
        if not of_site:
            return self._program.sites[name].position_m
        done_from, after = self._prefixes[name]
        first = bisect.bisect_right(done_from, t) - 1  # the moves before it are done by t
        begun = bisect.bisect_right(self._starts[name], t)  # the moves after it have not begun
        where = after[first]
        for k, move in enumerate(of_site[first:], first):
            if k >= begun and not _has_negative_zero(where):
                break
            where = tuple(x + _done(move, t) * d for x, d in zip(where, move.displacement_m))
        return where


class MovingSites:
    """The sites being moved within [start, end), asked in order of `start` (a walk through
    the timeline): the moves still running are kept by their end, so each query looks at
    those and at the moves that begin within it, not at every move."""

    def __init__(self, timeline: Timeline):
        self._moves = moves(timeline)  # in start order
        self._starts = [m.start_s for m in self._moves]
        self._begun = 0  # moves that began before the last query's start
        self._running: list[tuple[float, int]] = []  # (end, position in _moves) of those

    def __bool__(self) -> bool:
        return bool(self._moves)

    def during(self, start: float, end: float) -> set[str]:
        while self._begun < len(self._moves) and self._moves[self._begun].start_s < start:
            heapq.heappush(self._running, (self._moves[self._begun].end_s, self._begun))
            self._begun += 1
        while self._running and self._running[0][0] <= start:
            heapq.heappop(self._running)
        beginning = self._moves[self._begun:bisect.bisect_left(self._starts, end, lo=self._begun)]
        found = [self._moves[k] for _, k in self._running] + [m for m in beginning if start < m.end_s]
        return {s for m in found for s in m.targets}


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
    starts, running = [m.start_s for m in all_moves], []
    for k in order:
        move = all_moves[k]
        while done < len(by_end) and all_moves[by_end[done]].end_s <= move.start_s:
            m = all_moves[by_end[done]]
            settled[[where[s] for s in m.targets]] += m.displacement_m
            done += 1
        times = move.start_s + move.duration_s * taus
        overlapping = [all_moves[j] for j in _overlapping(all_moves, starts, running, k)]
        heapq.heappush(running, (move.end_s, k))
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


def _overlapping(all_moves: list[Event], starts: list[float], running: list[tuple[float, int]], k: int) -> list[int]:
    """Positions, in order, of the moves not ended when move k starts that begin before it ends
    (k among them unless it has ended): those begun before k from `running` (a heap of
    (end, position) of the moves before k, the ended ones dropped here), the others by a
    binary search of the starts (moves in start order) instead of a scan of every move."""
    move = all_moves[k]
    while running and running[0][0] <= move.start_s:
        heapq.heappop(running)
    earlier = sorted(j for _, j in running if all_moves[j].start_s < move.end_s)
    begun_by_end = bisect.bisect_left(starts, move.end_s)
    later = [j for j in range(k, max(begun_by_end, k + 1))
             if all_moves[j].end_s > move.start_s and (all_moves[j].start_s < move.end_s or j == k)]
    return earlier + later


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
