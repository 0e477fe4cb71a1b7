"""Geometry of the array over time: spacing, moves, fields and the pair models.

Two kinds of checks. Those of positions and moves (minimum spacing, deflectors,
velocity and acceleration limits, Rydberg pulses while atoms move) need no
atomic data. Those of the pair shifts (Le Roy radius, crossover radius, Förster
resonances, partial blockade, the quadratic Stark regime) ask ``atoms.pairs``,
and run only when two sites both see Rydberg pulses, so checking a program
without Rydberg pairs never imports the atomic-data library.

``pair_shifts`` gives, for each pair of Rydberg-driven sites, the shift at the
positions, angle and field of the first Rydberg pulse that reaches one of them.
``pair_shift_track`` (what `show` and the simulator use) follows the shift from
there on wherever the geometry changes (through and after each move of either
site, at each field edge), which the simulator plays from that time on: an atom
left in |r⟩ between pulses sees the V of where it is.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import replace

from ..lang import units
from ..lang.diagnostics import Diagnostic, error, warning
from ..program.model import Program
from . import motion
from .timeline import FIELD, MOVE, PULSE, Event, Timeline

BLOCKADE_MARGIN = 10.0  # |V| below 10 Ω: partial blockade
INDEPENDENT_BELOW = 1e-3  # |V| below 10⁻³ Ω: the atoms are meant to be independent
APPROACH_SAMPLES = 64


def _um(x: float) -> str:
    return units.format_quantity(x, units.LENGTH)


def _mhz(x: float) -> str:
    return units.format_quantity(x, units.FREQUENCY)


# ---------------------------------------------------------------- positions and moves


def check_geometry(program: Program, timeline: Timeline) -> list[Diagnostic]:
    """Spacing, move and pair-model diagnostics of the timeline."""
    out = _static_spacing(program) + _move_checks(program, timeline) + _pulses_while_moving(program, timeline)
    if any(d.is_error for d in out) or not rydberg_pairs(program, timeline):
        return out
    try:
        return out + _pair_checks(program, timeline) + _stark_limits(program, timeline)
    except (OSError, RuntimeError) as exc:  # sqlite3.Error is neither: see below
        return out + [_skipped(program, exc)]
    except Exception as exc:  # the atomic-data library failed (e.g. its shared database locked)
        if type(exc).__module__.split(".")[0] not in ("sqlite3", "arc"):
            raise
        return out + [_skipped(program, exc)]


def _skipped(program: Program, exc: Exception) -> Diagnostic:
    return warning(f"pair checks skipped: the atomic-data library failed ({exc}); run `check` again",
                   program.rig.span)


def _static_spacing(program: Program) -> list[Diagnostic]:
    limit, out = program.rig.min_spacing_m, []
    sites = list(program.sites.values())
    for a, b in _close_pairs(sites, limit):
        distance = math.dist(a.position_m, b.position_m)
        if 0 < distance < limit:
            out.append(error(f"sites `{a.name}` and `{b.name}` are {_um(distance)} apart, closer than the rig's "
                             f"minimum spacing {_um(limit)}", b.span, "move them apart, or set `min_spacing`"))
    return out


def _close_pairs(sites, limit: float):
    """Pairs of sites (in declaration order) within `limit`: a k-d tree for large arrays."""
    if len(sites) <= NEAR_PAIRS_ABOVE:
        return itertools.combinations(sites, 2)
    from scipy.spatial import cKDTree
    tree = cKDTree([s.position_m for s in sites])
    return [(sites[i], sites[j]) for i, j in sorted(tree.query_pairs(limit))]


def _move_checks(program: Program, timeline: Timeline) -> list[Diagnostic]:
    out = []
    limit = program.rig.min_spacing_m
    close = motion.closest_approaches(program, timeline, limit, APPROACH_SAMPLES)
    for k, move in enumerate(motion.moves(timeline)):
        out += _deflectors_and_limits(program, move)
        if k in close:
            a, b, distance = close[k]
            out.append(error(f"this move brings `{a}` within {_um(distance)} of `{b}`, closer than the "
                             f"minimum spacing {_um(limit)}", move.span))
    return out


def _deflectors_and_limits(program: Program, move: Event) -> list[Diagnostic]:
    out = []
    velocity, acceleration = motion.peak_speed(move)
    for site in move.targets:
        species = program.sites[site].species
        for k, axis in enumerate(motion.AXES):
            if move.displacement_m[k] == 0:
                continue
            port = motion.deflector(program, species, axis)
            if port is None:
                out.append(error(f"no deflector port moves `{species}` atoms along {axis}", move.span,
                                 f"declare a port with `kind deflector  axis {axis}` in the rig"))
                continue
            out += _limit(port, "max_velocity", velocity, "m/s", move)
            out += _limit(port, "max_acceleration", acceleration, "m/s²", move)
    return out


def _limit(port, key: str, value: float, unit: str, move: Event) -> list[Diagnostic]:
    limit = port.extra.get(key)
    if limit is None or value <= limit * (1 + 1e-9):
        return []
    what = key.replace("max_", "peak ")
    return [error(f"{what} {value:.4g} {unit} of this move is above the {limit:.4g} {unit} of deflector "
                  f"`{port.name}`", move.span, "lengthen the move")]


def _rydberg_pulses(program: Program, timeline: Timeline) -> list[Event]:
    return [e for e in timeline.events if e.kind == PULSE and program.rig.drives[e.drive].kind == "rydberg"]


def _pulses_while_moving(program: Program, timeline: Timeline) -> list[Diagnostic]:
    out, moving_sites = [], motion.MovingSites(timeline)
    if not moving_sites:
        return out
    for pulse in _rydberg_pulses(program, timeline):  # in start order, as MovingSites asks
        moving = moving_sites.during(pulse.start_s, pulse.end_s)
        if moving:
            out.append(warning(f"Rydberg pulse while {', '.join(sorted(moving))} "
                               f"{'is' if len(moving) == 1 else 'are'} moving: the pair distances change during "
                               f"it, and the simulator follows them in {MOVE_STEPS} steps of constant V per move",
                               pulse.span))
    return out


# ---------------------------------------------------------------- pair models


NEAR_PAIRS_ABOVE = 24  # driven sites beyond which far pairs are skipped with a k-d tree


def rydberg_pairs(program: Program, timeline: Timeline) -> list[tuple[str, str]]:
    """Pairs of sites (declaration order) that both see Rydberg pulses.

    In a large array without moves, only pairs close enough for |V| to reach
    INDEPENDENT_BELOW of the weakest Rydberg drive (farther ones are meant to be
    independent and get no diagnostic), so checks stay linear in the sites.
    """
    pulses = _rydberg_pulses(program, timeline)
    driven = {s for e in pulses for s in e.targets}
    names = tuple(n for n in program.sites if n in driven)
    if len(names) <= NEAR_PAIRS_ABOVE or any(e.kind == MOVE for e in timeline.events):
        return list(itertools.combinations(names, 2))
    from ..sim.model import _candidate_pairs  # one C6 per species pair, a k-d tree of the sites
    weakest = min((e.rabi_hz for e in pulses if e.rabi_hz > 0), default=0.0)
    return list(_candidate_pairs(program, names, INDEPENDENT_BELOW * weakest))


def field_of_stretches(stretches, t: float) -> float:
    """The electric field (V/m) at time t: the innermost of the `field` stretches (FIELD
    events, in timeline order) running then."""
    value = 0.0
    for e in stretches:
        if e.start_s <= t < e.end_s:
            value = e.value
    return value


class _Scene:
    """Positions and fields of one timeline, indexed once: the pair checks ask for them at
    every Rydberg pulse and every change of geometry, of every pair."""

    def __init__(self, program: Program, timeline: Timeline):
        self.program, self.timeline = program, timeline
        self.paths = motion.SitePaths(program, timeline)
        self.fields = [e for e in timeline.events if e.kind == FIELD]
        self._pulses: dict[str, list[Event]] = {}
        for pulse in _rydberg_pulses(program, timeline):  # in start order
            for name in dict.fromkeys(pulse.targets):
                self._pulses.setdefault(name, []).append(pulse)

    def field(self, t: float) -> float:
        return field_of_stretches(self.fields, t)

    def rydberg_pulses_of(self, a: str, b: str) -> list[Event]:
        """The Rydberg pulses reaching either site, in start order (one reaching both: once)."""
        either = {id(p): p for name in (a, b) for p in self._pulses.get(name, ())}
        return sorted(either.values(), key=lambda p: (p.start_s, p.index))

    def moves_of(self, a: str, b: str) -> list[Event]:
        """The moves of either site (a move of both: once)."""
        return list({id(m): m for name in (a, b) for m in self.paths.moves_of(name)}.values())


def _geometry(scene: _Scene, t: float, a: str, b: str):
    """(R, θ, E) of the pair at time t, rounded so that equal geometries compare equal (R to 12
    significant digits: mid-move distances keep V to ~1e-11)."""
    from ..atoms.pairs import angle_to_axis
    ra, rb = (scene.paths.position(s, t) for s in (a, b))
    theta = angle_to_axis(ra, rb, scene.program.rig.quantization_axis)
    return float(f"{math.dist(ra, rb):.12g}"), round(theta, 12), round(scene.field(t), 12)


def _separation(scene: _Scene, t: float, a: str, b: str) -> tuple[float, ...]:
    """r_b − r_a (m) at time t."""
    ra, rb = (scene.paths.position(s, t) for s in (a, b))
    return tuple(y - x for x, y in zip(ra, rb))


def _shift(program: Program, a: str, b: str, geometry):
    from ..atoms.pairs import pair_shift
    sa, sb = (program.rig.species[program.sites[s].species] for s in (a, b))
    resonant = frozenset((sa.name, sb.name)) in program.rig.resonant_pairs
    distance, theta, field = geometry
    return pair_shift(sa.data, sa.rydberg, sb.data, sb.rydberg, distance, theta, field, resonant)


def _pair_geometries(program: Program, timeline: Timeline, pairs=None) -> dict[tuple[str, str], list]:
    """Per Rydberg pair (of `pairs`, if given), the distinct (R, θ, E) of the Rydberg pulses
    reaching it, with the pulse; and those at the end of each move of either site between
    its first and last Rydberg pulse (an atom may wait in |r⟩ there), with the move."""
    out: dict[tuple[str, str], list] = {}
    scene = _Scene(program, timeline)
    for a, b in rydberg_pairs(program, timeline):
        if pairs is not None and (a, b) not in pairs:
            continue
        found, seen = out.setdefault((a, b), []), set()
        reaching = scene.rydberg_pulses_of(a, b)
        if not reaching:
            continue
        first, last = reaching[0].start_s, max(p.end_s for p in reaching)
        between = [m for m in scene.moves_of(a, b) if first < m.end_s < last]
        for event, t in [(p, p.start_s) for p in reaching] + [(m, m.end_s) for m in between]:
            geometry = _geometry(scene, t, a, b)
            if geometry not in seen:
                seen.add(geometry)
                found.append((geometry, event))
    return out


def pair_shifts(program: Program, timeline: Timeline, pairs=None) -> dict[tuple[str, str], object]:
    """The ``PairShift`` of every Rydberg pair (of `pairs`, if given) at its first Rydberg pulse
    (see the module notes)."""
    return {pair: track[0][1] for pair, track in pair_shift_track(program, timeline, pairs).items()}


# A move after a pair's first Rydberg pulse is played as MOVE_STEPS steps of constant V (equal
# times, on the tick). Each step's V is its mean over the step by 3-point Gauss–Legendre rather
# than its midpoint value: the phase ∫V dt of a pair held in |r⟩ through a 15 → 3 µm approach
# (V ∝ R⁻⁶ on the minimum-jerk path) is then within 5e-6 of the exact integral, midpoint values
# within 3e-3 only (a large error at MHz shifts over a 100 µs move: ∫V dt is hundreds of radians).
MOVE_STEPS = 8
GAUSS_NODES = ((0.5 - math.sqrt(15) / 10, 5 / 18), (0.5, 8 / 18), (0.5 + math.sqrt(15) / 10, 5 / 18))


def pair_shift_track(program: Program, timeline: Timeline, pairs=None) -> dict[tuple[str, str], tuple]:
    """Per Rydberg pair (of `pairs`, if given): ((start_s, PairShift, separation r_b − r_a in m), ...)
    from its first Rydberg pulse on, with a new entry wherever its geometry (R, θ, E) changes:
    at each field edge, at the end of each move of either site and at the MOVE_STEPS steps
    through it (there, the PairShift at the step's midpoint with V the step's mean). Each holds
    from its start until the next one (the simulator's V per segment).

    >>> # a pulse at 15 µm, a move to 4 µm, a wait, a pulse: entries at the first pulse,
    >>> # at the 8 steps of the move, and at its end (V at 4 µm through the wait)
    """
    out: dict[tuple[str, str], tuple] = {}
    shifts: dict[tuple, object] = {}
    scene = _Scene(program, timeline)
    for a, b in rydberg_pairs(program, timeline):
        if pairs is not None and (a, b) not in pairs:
            continue
        reaching = scene.rydberg_pulses_of(a, b)
        if reaching:
            out[(a, b)] = _track(scene, a, b, reaching[0].start_s, shifts)
    return out


def _track(scene: _Scene, a: str, b: str, first: float, shifts: dict) -> tuple:
    """The entries of one pair's track (see `pair_shift_track`); `shifts` caches PairShifts by geometry."""
    times = _change_times(scene, a, b, first)
    track, last = [], None
    for t0, t1 in zip(times, times[1:] + [max(scene.timeline.duration_s, times[-1])]):
        nodes = tuple(_geometry(scene, t0 + x * (t1 - t0), a, b) for x, _ in GAUSS_NODES)
        if nodes == last:
            continue
        last = nodes
        track.append((t0, _mean_shift(scene.program, a, b, nodes, shifts),
                      _separation(scene, (t0 + t1) / 2, a, b)))
    return tuple(track)


def _change_times(scene: _Scene, a: str, b: str, first: float) -> list[float]:
    """The pair's first Rydberg pulse and every later time its geometry may change: the steps
    and end of each move of either site, and the edges of every field stretch."""
    timeline = scene.timeline
    tick, times = timeline.tick_s, [first]
    for move in scene.moves_of(a, b):
        steps = range(MOVE_STEPS)
        times += [move.start_s + round(k * move.duration_s / MOVE_STEPS / tick) * tick for k in steps]
        times.append(move.end_s)
    times += [t for e in scene.fields for t in (e.start_s, e.end_s)]
    out: list[float] = []
    for t in sorted(t for t in times if first <= t < timeline.duration_s):
        if not out or t - out[-1] > 1e-3 * tick:  # one entry per sub-tick instant
            out.append(t)
    return out


def _mean_shift(program: Program, a: str, b: str, nodes: tuple, shifts: dict):
    """The PairShift at the middle node; V the Gauss–Legendre mean over the nodes when they differ."""
    def at(geometry):
        key = (program.sites[a].species, program.sites[b].species, geometry)
        if key not in shifts:
            shifts[key] = _shift(program, a, b, geometry)
        return shifts[key]
    middle = at(nodes[1])
    if nodes[0] == nodes[1] == nodes[2]:
        return middle
    return replace(middle, shift_hz=sum(w * at(g).shift_hz for g, (_, w) in zip(nodes, GAUSS_NODES)))


def _pair_checks(program: Program, timeline: Timeline) -> list[Diagnostic]:
    out: list[Diagnostic] = []
    warned_forster: set = set()
    for (a, b), found in _pair_geometries(program, timeline).items():
        for geometry, pulse in found:
            out += _one_pair(program, a, b, _shift(program, a, b, geometry), pulse, warned_forster)
    return out


def _one_pair(program: Program, a: str, b: str, shift, pulse: Event, warned: set) -> list[Diagnostic]:
    where = f"`{a}`-`{b}` at {_um(shift.distance_m)}"
    if not shift.valid:
        return [error(f"{where} is inside the Le Roy radius {_um(shift.le_roy_radius_m)}: the electron clouds "
                      "overlap and no pair model holds", program.sites[b].span, "move the sites apart")]
    out = []
    key = (program.sites[a].species, program.sites[b].species, shift.field_v_m)
    if shift.near_forster and key not in warned:
        warned.add(key)
        field = f" at {shift.field_v_m:.4g} V/m" if shift.field_v_m else ""
        out.append(warning(f"{where}: the pair is {shift.defect_hz / 1e6:.3g} MHz from a Förster resonance{field}; "
                           f"the van der Waals C6 is not to be trusted (model used: {shift.model})", pulse.span))
    if shift.model == "diagonalised":
        out.append(warning(f"{where} is inside twice the crossover radius {_um(shift.crossover_radius_m)} where "
                           f"the R⁻⁶ law fails; V/h = {_mhz(shift.shift_hz)} from the diagonalised pair "
                           f"potential (overlap {shift.overlap:.2f})", pulse.span))
    out += _blockade(program, where, shift, pulse)
    return out


def _blockade(program: Program, where: str, shift, pulse: Event) -> list[Diagnostic]:
    ratio = abs(shift.shift_hz) / pulse.rabi_hz if pulse.rabi_hz else math.inf
    if not INDEPENDENT_BELOW < ratio < BLOCKADE_MARGIN:
        return []
    radius = (abs(shift.c6_hz_m6) / pulse.rabi_hz) ** (1 / 6)
    return [warning(f"{where}: pair shift |V|/h = {_mhz(abs(shift.shift_hz))} is only {ratio:.3g} times the Rabi "
                    f"frequency {_mhz(pulse.rabi_hz)} (blockade radius {_um(radius)}): the blockade is partial",
                    pulse.span, "bring the sites closer or lower the Rabi frequency")]


def _stark_limits(program: Program, timeline: Timeline) -> list[Diagnostic]:
    from ..atoms import stark
    out = []
    for event in (e for e in timeline.events if e.kind == FIELD and e.value):
        for sp in (s for s in program.rig.species.values() if s.rydberg is not None):
            limit = stark.polarisability(sp.data, sp.rydberg).quadratic_limit_v_m
            if abs(event.value) > limit:
                out.append(warning(f"{abs(event.value):.4g} V/m is beyond the quadratic Stark regime of "
                                   f"{sp.name} {sp.rydberg.label} (about {limit:.3g} V/m): the shifts are "
                                   "estimates", event.span))
    return out


def stark_shift_hz(program: Program, species: str, field_v_m: float) -> float:
    """The Rydberg level's Stark shift of a species at a field (0 without a level or field)."""
    sp = program.rig.species[species]
    if sp.rydberg is None or not field_v_m:
        return 0.0
    from ..atoms import stark
    return stark.stark_shift_hz(sp.data, sp.rydberg, field_v_m)


__all__ = ["check_geometry", "pair_shifts", "pair_shift_track", "rydberg_pairs", "field_of_stretches",
           "stark_shift_hz", "MOVE"]
