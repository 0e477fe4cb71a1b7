"""Geometry of the array over time: spacing, moves, fields and the pair models.

Two kinds of checks. Those of positions and moves (minimum spacing, deflectors,
velocity and acceleration limits, Rydberg pulses while atoms move) need no
atomic data. Those of the pair shifts (Le Roy radius, crossover radius, Förster
resonances, partial blockade, the quadratic Stark regime) ask ``atoms.pairs``,
and run only when two sites both see Rydberg pulses, so checking a program
without Rydberg pairs never imports the atomic-data library.

``pair_shifts`` is what `show` and the simulator use: for each pair of
Rydberg-driven sites, the shift at the positions, angle and field of the first
Rydberg pulse that reaches one of them. ``pair_shift_track`` adds the shift at
every later Rydberg pulse whose geometry differs (after a move, or in another
field), which the simulator plays from that pulse on.
"""
from __future__ import annotations

import itertools
import math

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
    out = []
    for pulse in _rydberg_pulses(program, timeline):
        moving = motion.moving_at(timeline, pulse.start_s, pulse.end_s)
        if moving:
            out.append(warning(f"Rydberg pulse while {', '.join(sorted(moving))} "
                               f"{'is' if len(moving) == 1 else 'are'} moving: the pair distances change during "
                               "it, and the simulator uses the positions at its start", pulse.span))
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


def field_at(timeline: Timeline, t: float) -> float:
    """The electric field (V/m) at time t: the innermost field stretch running then."""
    value = 0.0
    for e in timeline.events:
        if e.kind == FIELD and e.start_s <= t < e.end_s:
            value = e.value
    return value


def _geometry(program: Program, timeline: Timeline, pulse: Event, a: str, b: str):
    where = motion.positions_at(program, timeline, pulse.start_s)
    from ..atoms.pairs import angle_to_axis
    theta = angle_to_axis(where[a], where[b], program.rig.quantization_axis)
    return math.dist(where[a], where[b]), theta, field_at(timeline, pulse.start_s)


def _shift(program: Program, a: str, b: str, geometry):
    from ..atoms.pairs import pair_shift
    sa, sb = (program.rig.species[program.sites[s].species] for s in (a, b))
    resonant = frozenset((sa.name, sb.name)) in program.rig.resonant_pairs
    distance, theta, field = geometry
    return pair_shift(sa.data, sa.rydberg, sb.data, sb.rydberg, distance, theta, field, resonant)


def _pair_geometries(program: Program, timeline: Timeline, pairs=None) -> dict[tuple[str, str], list]:
    """Per Rydberg pair (of `pairs`, if given), the distinct (R, θ, E) of the Rydberg pulses
    reaching it, with the pulse."""
    out: dict[tuple[str, str], list] = {}
    pulses = _rydberg_pulses(program, timeline)
    for a, b in rydberg_pairs(program, timeline):
        if pairs is not None and (a, b) not in pairs:
            continue
        seen = out.setdefault((a, b), [])
        for pulse in (p for p in pulses if a in p.targets or b in p.targets):
            geometry = tuple(round(x, 12) for x in _geometry(program, timeline, pulse, a, b))
            if geometry not in (g for g, _ in seen):
                seen.append((geometry, pulse))
    return out


def pair_shifts(program: Program, timeline: Timeline, pairs=None) -> dict[tuple[str, str], object]:
    """The ``PairShift`` of every Rydberg pair (of `pairs`, if given) at its first Rydberg pulse
    (see the module notes)."""
    return {pair: track[0][1] for pair, track in pair_shift_track(program, timeline, pairs).items()}


def pair_shift_track(program: Program, timeline: Timeline, pairs=None) -> dict[tuple[str, str], tuple]:
    """Per Rydberg pair (of `pairs`, if given): ((start_s, PairShift, separation r_b − r_a in m), ...)
    at its first Rydberg pulse and at every later one whose geometry (R, θ, E) differs from the
    pulse before; each shift holds from that pulse's start on (the simulator's V per segment).

    >>> # a pulse at 15 µm, a move to 4 µm, a pulse: two entries, V at 15 µm then at 4 µm
    """
    out: dict[tuple[str, str], tuple] = {}
    pulses = _rydberg_pulses(program, timeline)
    shifts: dict[tuple, object] = {}
    for a, b in rydberg_pairs(program, timeline):
        if pairs is not None and (a, b) not in pairs:
            continue
        track, last = [], None
        for pulse in (p for p in pulses if a in p.targets or b in p.targets):
            geometry = tuple(round(x, 12) for x in _geometry(program, timeline, pulse, a, b))
            if geometry == last:
                continue
            last = geometry
            key = (program.sites[a].species, program.sites[b].species, geometry)
            if key not in shifts:
                shifts[key] = _shift(program, a, b, geometry)
            where = motion.positions_at(program, timeline, pulse.start_s)
            track.append((pulse.start_s, shifts[key], tuple(y - x for x, y in zip(where[a], where[b]))))
        if track:
            out[(a, b)] = tuple(track)
    return out


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


__all__ = ["check_geometry", "pair_shifts", "pair_shift_track", "rydberg_pairs", "field_at", "stark_shift_hz", "MOVE"]
