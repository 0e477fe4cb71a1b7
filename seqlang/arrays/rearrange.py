"""Rearrangement: which loaded atom fills which target site, by which path, in which order.

**Assignment.** Loaded atoms of the species (rows) against target sites (columns),
the cost is the straight travel distance, solved exactly by the Hungarian method
(Kuhn, Naval Res. Logist. Q. 2, 83 (1955); ``scipy.optimize.linear_sum_assignment``).
An atom already on a target site costs nothing, so it stays: any plan that moved
it could swap it back and be shorter.

**Moves: one tweezer, one atom at a time, along corridors.** Each atom is carried
by itself (sequential moves) along the corridors halfway between lattice rows and
columns: a half-diagonal step off its site onto a corner of its cell, along a row
corridor, along a column corridor, and a half-diagonal step onto the target. No
site lies on a corridor, so a carried atom never comes closer than half a pitch to
any trap, loaded or not, whatever the order; the order only has to empty a target
site before an atom is brought there (an atom on a target that is assigned
elsewhere leaves first). We chose sequential corridor moves over parallel moves of
many tweezers because a single steered tweezer needs nothing of the deflectors
beyond what a `move` already uses (one ramp per axis), never crosses another
carried atom, and needs no rule against crossing paths; the price is time, which
the plan reports. `strategy straight` moves along the straight line instead
(for sparse layouts; the geometry checks then refuse a path that comes too close).

Each leg starts and ends at rest (minimum-jerk), timed by the deflectors' speed and
acceleration limits. An atom survives its relocation with the species'
`move_survival`, times exp(−L/`move_loss_length`) for a path of length L.
"""
from __future__ import annotations

import heapq
import math
from dataclasses import dataclass

from ..compile import motion

Vec = tuple[float, float, float]


@dataclass(frozen=True)
class Carry:
    """One atom carried from `source` onto `target`, leg by leg."""

    source: str
    target: str
    legs: tuple[tuple[Vec, Vec, float], ...]  # (start, end, duration s)
    length_m: float
    survival: float


@dataclass(frozen=True)
class FillPlan:
    """The plan of one `fill` for one species: assignments, carries in play order, totals."""

    species: str
    targets: tuple[str, ...]
    kept: tuple[str, ...]  # target sites whose own atom stays
    carries: tuple[Carry, ...]
    spare: tuple[str, ...]  # loaded atoms left where they are
    duration_s: float
    expected_filling: float
    strategy: str = "corridors"
    pool: tuple[str, ...] = ()  # every trap of the species it may take atoms from


def assign(sources: np.ndarray, targets: np.ndarray) -> list[tuple[int, int]]:
    """(source row, target row) pairs of least total distance; len(sources) >= len(targets)."""
    from scipy.optimize import linear_sum_assignment
    from scipy.spatial.distance import cdist
    rows, cols = linear_sum_assignment(cdist(sources, targets))
    return sorted(zip(rows.tolist(), cols.tolist()), key=lambda rc: rc[1])


def play_order(pairs: list[tuple[str, str]], occupied: set[str]) -> list[tuple[str, str]]:
    """The (source, target) carries in an order that finds every target empty on arrival.

    A carry waits until its target's own atom has left; the first ready carry in the
    given order goes next. The assignment has no cycles (a cycle of carries among
    occupied targets would be longer than leaving those atoms in place).
    """
    waiting = {t: k for k, (s, t) in enumerate(pairs)}
    ready = [k for k, (s, t) in enumerate(pairs) if t not in occupied]
    heapq.heapify(ready)
    order = []
    while ready:
        k = heapq.heappop(ready)
        source, target = pairs[k]
        order.append(pairs[k])
        after = waiting.get(source)  # the carry that waited for this atom to leave
        if after is not None and after != k:
            heapq.heappush(ready, after)
    if len(order) != len(pairs):  # not reached for an optimal assignment; kept as a guard
        raise RuntimeError("the carries wait on each other in a cycle")
    return order


def corridor_path(start: Vec, end: Vec, layout) -> list[Vec]:
    """Corner points of the corridor path from one lattice site to another (a square or
    rectangular lattice): off the site, along a row corridor, a column corridor, onto the target."""
    to_local, to_world = _frames(layout)
    (xs, ys), (xt, yt) = to_local(start), to_local(end)
    hx, hy = layout.pitch_m[0] / 2, layout.pitch_m[1] / 2
    sx, sy = (1.0 if xt >= xs else -1.0), (1.0 if yt >= ys else -1.0)
    first = (xs + sx * hx, ys + sy * hy)
    last = (xt - sx * hx if abs(xt - xs) > hx else first[0], yt - sy * hy if abs(yt - ys) > hy else first[1])
    points = [(xs, ys), first, (last[0], first[1]), last, (xt, yt)]
    out = [points[0]]
    for p in points[1:]:
        if math.dist(p, out[-1]) > 1e-12:
            out.append(p)
    return [to_world(p, start[2]) for p in out]


def _frames(layout):
    c, s = math.cos(layout.rotation_rad), math.sin(layout.rotation_rad)
    ox, oy = layout.origin_m[0], layout.origin_m[1]

    def to_local(p):
        dx, dy = p[0] - ox, p[1] - oy
        return (c * dx + s * dy, -s * dx + c * dy)

    def to_world(p, z):
        return (c * p[0] - s * p[1] + ox, s * p[0] + c * p[1] + oy, z)
    return to_local, to_world


def leg_duration(length: float, velocity: float | None, acceleration: float | None) -> float:
    """Shortest minimum-jerk leg within the limits, rounded up to a whole microsecond."""
    times = []
    if velocity:
        times.append(motion.PEAK_VELOCITY * length / velocity)
    if acceleration:
        times.append(math.sqrt(motion.PEAK_ACCELERATION * length / acceleration))
    return max(1e-6, math.ceil(max(times) * 1e6 - 1e-6) / 1e6)


def survival(length: float, per_move: float, loss_length: float | None) -> float:
    """move_survival · exp(−L/loss_length)."""
    return per_move * (math.exp(-length / loss_length) if loss_length else 1.0)
