"""Build the few-atom model from a program and its played timeline.

Per atom the levels are |0⟩, |1⟩ (the qubit), |r⟩ (Rydberg) and |x⟩ (lost).
In the frame rotating with each drive, a pulse on site i contributes

    H/ħ = (Ω/2)(e^{iφ}|b⟩⟨a| + h.c.) − Δ|b⟩⟨b|

with (a, b) = (0, 1) for microwave and Raman drives and (1, r) for Rydberg
drives, Ω = 2π·rabi_hz and Δ = 2π·detuning_hz. Every pair of atoms has
V_ij |rr⟩⟨rr| with V/h = C6/R⁶. Nothing here runs a solver.
"""
from __future__ import annotations

import bisect
import itertools
import math
from dataclasses import dataclass, replace

import numpy as np

from ..compile import envelopes
from ..compile.timeline import FIELD, IMAGE, PULSE, SWITCH, Event, Timeline
from ..program.model import Program

LEVELS = ("0", "1", "r", "x")
DIM = len(LEVELS)
G0, G1, RYD, LOST = range(DIM)
INTERMEDIATE = 4  # |e⟩, present only in the explicit-ladder mode
LADDER_DIM = DIM + 1
TRANSITION = {"microwave": (G0, G1), "raman": (G0, G1), "rydberg": (G1, RYD)}
# Shaped pulses are played as this many piecewise-constant steps (midpoint samples)
# unless the drive's sample rate asks for fewer.
SHAPE_STEPS = 64
FEATURE_STEPS = 64  # extra steps across a narrow feature of a shaped pulse


@dataclass(frozen=True)
class Drive1:
    """One coupling active in a segment: site index, levels, Ω, Δ (rad/s), φ."""

    site: int
    lower: int
    upper: int
    omega: float
    delta: float
    phase: float
    drive: str = ""
    event: int = -1  # timeline event that plays it (feed-forward looks conditioned ones up by it)


@dataclass(frozen=True)
class LevelShift:
    """A light shift of one level of one site while a pulse plays (rad/s, added to H).

    `scatter` is the fraction (Ω_leg/2Δ)² of the intermediate state mixed into the
    level, so that it scatters at Γ_e·scatter; `loss_rate` (1/s) is that rate
    once the scattering source is switched on.
    """

    site: int
    level: int
    shift: float
    loss_rate: float = 0.0
    scatter: float = 0.0
    event: int = -1


@dataclass(frozen=True)
class Segment:
    """A time interval with constant couplings; `image` is set for a measurement point."""

    start_s: float
    duration_s: float
    couplings: tuple[Drive1, ...]
    image: Event | None = None
    shifts: tuple[LevelShift, ...] = ()
    # Pair shifts in force during this segment when they differ from the model's (a move, a field):
    # ((i, j), V rad/s, separation r_j − r_i in m) for every pair of the model; None: the model's.
    interactions: tuple[tuple[tuple[int, int], float, tuple[float, ...]], ...] | None = None


@dataclass(frozen=True)
class Model:
    """Sites in order, pair interactions (rad/s) and the segments to propagate."""

    sites: tuple[str, ...]
    species: tuple[str, ...]
    interactions: dict[tuple[int, int], float]
    segments: tuple[Segment, ...]
    dim: int = DIM
    images: tuple[Event, ...] = ()  # every imaging of the timeline, of either species (for crosstalk)
    # (time_s, traps_on) of every switch of a port declared `role traps`, in time order; None when
    # the rig declares no trap switch (the Doppler source is then free flight all along).
    traps: tuple[tuple[float, bool], ...] | None = None
    # Separation r_j − r_i (m) of each pair at the geometry of its pair shift in `interactions`
    # (the first Rydberg pulse reaching it); pairs missing here use the declared site positions.
    separations: dict[tuple[int, int], tuple[float, ...]] | None = None

    @property
    def size(self) -> int:
        return len(self.sites)


def pair_interactions_hz(program: Program, sites: tuple[str, ...],
                         cutoff_hz: float = 0.0) -> dict[tuple[str, str], float]:
    """V/h = C6/R⁶ for every pair of sites whose species have Rydberg levels.

    With `cutoff_hz`, pairs farther apart than where |C6|/R⁶ of their species falls below
    it are not looked up at all (a k-d tree finds the near pairs), so a large array of
    distant atoms costs one C6 per species pair and its near neighbours only.
    """
    from ..atoms import rydberg
    out = {}
    c6s: dict[tuple[str, str], object] = {}  # one lookup per species pair
    for a, b in _candidate_pairs(program, sites, cutoff_hz):
        sa, sb = program.sites[a], program.sites[b]
        spa, spb = program.rig.species[sa.species], program.rig.species[sb.species]
        if spa.rydberg is None or spb.rydberg is None:
            continue
        key = (sa.species, sb.species)
        if key not in c6s:
            c6s[key] = rydberg.c6_hz_m6(spa.data, spa.rydberg, spb.data, spb.rydberg)
        out[(a, b)] = rydberg.interaction_hz(c6s[key], math.dist(sa.position_m, sb.position_m))
    return out


def _candidate_pairs(program: Program, sites: tuple[str, ...], cutoff_hz: float):
    """Pairs of `sites` (in order) that may interact above `cutoff_hz` (every pair without one)."""
    if cutoff_hz <= 0 or len(sites) < 3:
        yield from itertools.combinations(sites, 2)
        return
    from scipy.spatial import cKDTree

    from ..atoms import rydberg
    species = {program.sites[s].species for s in sites}
    radius = 0.0
    for a in species:
        for b in species:
            sa, sb = program.rig.species[a], program.rig.species[b]
            if sa.rydberg is not None and sb.rydberg is not None:
                c6 = abs(rydberg.interaction_hz(rydberg.c6_hz_m6(sa.data, sa.rydberg, sb.data, sb.rydberg), 1.0))
                radius = max(radius, 1.001 * (c6 / cutoff_hz) ** (1 / 6))
    points = np.array([program.sites[s].position_m for s in sites], dtype=float)
    pairs = cKDTree(points).query_pairs(radius, output_type="ndarray")
    for i, j in sorted((min(i, j), max(i, j)) for i, j in pairs.tolist()):
        yield sites[i], sites[j]


def build_model(program: Program, timeline: Timeline, sites: tuple[str, ...],
                interactions_hz: dict[tuple[str, str], float], ladder: bool = False,
                tracks: dict | None = None) -> Model:
    """The model of the atoms in `sites` under the played `timeline`.

    With ``ladder`` the intermediate state of every Rydberg drive with declared
    legs is kept explicit (five levels per atom) instead of being eliminated.
    ``tracks`` (pair of names → ((start_s, V/h in Hz, separation m), ...), from
    `compile.geometry.pair_shift_track`) gives the pair shifts that change during the
    sequence (through and after a move, at a field edge): the segments split at each
    change, and each segment from a change on plays its V.
    """
    index = {name: i for i, name in enumerate(sites)}
    pairs = {(index[a], index[b]): 2 * math.pi * v for (a, b), v in interactions_hz.items()
             if a in index and b in index}
    local = {(index[a], index[b]): track for (a, b), track in (tracks or {}).items()
             if a in index and b in index and (index[a], index[b]) in pairs}
    relevant = [e for e in timeline.events if e.kind in (PULSE, IMAGE) and set(e.targets) & set(sites)]
    # Pair shifts and Stark shifts change between pulses too (an atom may sit in |r⟩ then).
    changes = [t for track in local.values() for t, _, _ in track[1:]]
    changes += [t for e in timeline.events if e.kind == FIELD for t in (e.start_s, e.end_s)]
    segments = _stark_shifted(program, timeline, sites,
                              _segments(program, relevant, index, timeline.duration_s, ladder, changes))
    segments = _moved_pairs(segments, pairs, local, program.rig.tick_s)
    species = tuple(program.sites[s].species for s in sites)
    images = tuple(e for e in timeline.events if e.kind == IMAGE)
    separations = {p: tuple(track[0][2]) for p, track in local.items()} or None
    return Model(tuple(sites), species, pairs, tuple(segments), LADDER_DIM if ladder else DIM, images,
                 trap_switches(program, timeline), separations)


def _moved_pairs(segments: list[Segment], pairs: dict, tracks: dict, tick: float) -> list[Segment]:
    """Segments from a later entry of a pair's track on carry every pair's V in force then
    (tracks are in time order: each entry is found by bisection, not by a scan per segment)."""
    if not any(len(t) > 1 for t in tracks.values()):
        return segments
    order = sorted(pairs)
    times = {pair: [entry[0] for entry in track] for pair, track in tracks.items()}
    out = []
    for seg in segments:
        now = seg.start_s + 1e-3 * tick
        values, changed = [], False
        for pair in order:
            track = tracks.get(pair)
            count = bisect.bisect_right(times[pair], now) if track else 0
            if count > 1:
                changed = True
                values.append((pair, 2 * math.pi * track[count - 1][1], tuple(track[count - 1][2])))
            else:
                values.append((pair, pairs[pair], tuple(track[0][2]) if track else ()))
        out.append(replace(seg, interactions=tuple(values)) if changed else seg)
    return out


def segment_interactions(model: Model, segment: Segment) -> dict[tuple[int, int], float]:
    """V_ij (rad/s) in force during `segment`."""
    if segment.interactions is None:
        return model.interactions
    return {pair: v for pair, v, _ in segment.interactions}


def weakest_interactions(model: Model) -> dict[tuple[int, int], float]:
    """Per pair, the V (rad/s) of smallest magnitude over the segments (for blockade truncation)."""
    out = dict(model.interactions)
    for seg in model.segments:
        for pair, v, _ in seg.interactions or ():
            if abs(v) < abs(out[pair]):
                out[pair] = v
    return out


def trap_switches(program: Program, timeline: Timeline) -> tuple[tuple[float, bool], ...] | None:
    """(time_s, on) of each `switch` of a port declared `role traps` (the traps are on at t = 0,
    as in `compile.checks`), or None when the rig declares no trap switch."""
    ports = {q.name for q in program.rig.ports.values() if q.role == "traps"}
    ports |= {q.channel for q in program.rig.ports.values() if q.role == "traps"}
    if not ports:
        return None
    return tuple((e.start_s, e.value > 0.5) for e in sorted(timeline.events, key=lambda e: (e.start_s, e.index))
                 if e.kind == SWITCH and e.port in ports)


def _stark_shifted(program: Program, timeline: Timeline, sites, segments: list[Segment]) -> list[Segment]:
    """Each site's Rydberg level moved by its DC Stark shift where a `field` stretch runs (the segments
    split at the field edges, so the field at a segment's midpoint holds through it)."""
    from ..compile.geometry import field_of_stretches, stark_shift_hz
    stretches = [e for e in timeline.events if e.kind == FIELD]
    if not stretches:
        return segments
    out = []
    for seg in segments:
        field = field_of_stretches(stretches, seg.start_s + seg.duration_s / 2)
        extra = tuple(LevelShift(i, RYD, 2 * math.pi * stark_shift_hz(program, program.sites[s].species, field))
                      for i, s in enumerate(sites) if field)
        out.append(Segment(seg.start_s, seg.duration_s, seg.couplings, seg.image, seg.shifts + extra)
                   if extra and seg.image is None else seg)
    return out


# Segment boundaries are kept in 1/SUBTICKS of a tick: the played timeline is on the tick grid,
# except for the latency remainders of the outputs (`with_latency_remainders`).
SUBTICKS = 1000


def with_latency_remainders(timeline: Timeline, remainders: dict[str, float]) -> Timeline:
    """The played timeline with every pulse and imaging of an output moved by that output's
    latency remainder (compile/hardware.py: what whole ticks do not compensate; positive is
    late), resolved to 1/SUBTICKS of a tick.

    >>> # latency 81 ns at a 2 ns tick: 40 ticks compensated, the output's pulses play 1 ns late
    """
    from ..compile.timeline import evolve
    if not any(remainders.values()):
        return timeline
    moved = tuple(evolve(e, start_s=e.start_s + remainders.get(e.port, 0.0))
                  if e.kind in (PULSE, IMAGE) and remainders.get(e.port) else e for e in timeline.events)
    end = max([timeline.duration_s] + [e.end_s for e in moved])
    return Timeline(moved, end, timeline.tick_s, timeline.quantized, timeline.shift_s)


def _tick(t: float, tick: float) -> int:
    return round(t / tick * SUBTICKS)


def _seconds(k: int, tick: float) -> float:
    """A boundary in seconds; whole ticks exactly as k·tick."""
    whole, part = divmod(k, SUBTICKS)
    return whole * tick if not part else k * tick / SUBTICKS


def _boundaries(events: list[Event], total: int, tick: float, changes=()) -> list[int]:
    """Every start and end, and the times in `changes`, in 1/SUBTICKS ticks."""
    times = {0, total} | {_tick(t, tick) for t in changes}
    for e in events:
        times.add(_tick(e.start_s, tick))
        if e.kind == PULSE:
            times.add(_tick(e.end_s, tick))
    return sorted(t for t in times if 0 <= t <= total)


def _segments(program: Program, events: list[Event], index: dict[str, int], total_s: float,
              ladder: bool, changes=()) -> list[Segment]:
    tick = program.rig.tick_s
    pulses = [(e, _tick(e.start_s, tick), _tick(e.end_s, tick)) for e in events if e.kind == PULSE]
    images = [(e, _tick(e.start_s, tick)) for e in events if e.kind == IMAGE]
    times = _boundaries(events, _tick(total_s, tick), tick, changes)
    out: list[Segment] = []
    for k0, k1 in zip(times, times[1:] + [None]):
        out += [Segment(_seconds(k0, tick), 0.0, (), e) for e, k in sorted(images, key=lambda x: x[0].index)
                if k == k0]
        if k1 is None:
            break
        active = [e for e, a, b in pulses if a <= k0 and b >= k1]
        out += _pulse_steps(program, active, index, _seconds(k0, tick), _seconds(k1, tick), ladder)
    return out


def _pulse_steps(program: Program, active: list[Event], index: dict[str, int], t0: float, t1: float,
                 ladder: bool):
    """One segment for square pulses; piecewise-constant steps where a shaped pulse plays.

    Steps are uniform (at most SHAPE_STEPS, never finer than the drive's samples), plus
    FEATURE_STEPS more across a feature much narrower than the pulse (a Gaussian's ±6σ,
    a short ramp), so that a narrow peak in a long window is not stepped over; each
    step plays the envelope's average over the step (4-point Gauss–Legendre), which
    keeps the pulse area to the quadrature's accuracy.
    """
    if t1 <= t0:
        return []
    edges = [t0, t1]
    for p in (p for p in active if p.shape.kind != "square"):
        rate = program.rig.drives[p.drive].sample_rate_hz
        edges += list(np.linspace(t0, t1, min(SHAPE_STEPS, max(1, round((t1 - t0) * rate))) + 1))
        for lo, hi in _narrow_features(p):
            lo, hi = max(lo, t0), min(hi, t1)
            if hi > lo:
                edges += list(np.linspace(lo, hi, min(FEATURE_STEPS, max(1, round((hi - lo) * rate))) + 1))
    out = []
    for a, b in _distinct_steps(edges, t1 - t0):
        couplings, shifts = _couplings(program, active, index, a, b, ladder)
        out.append(Segment(a, b - a, couplings, shifts=shifts))
    return out


def _narrow_features(pulse: Event) -> list[tuple[float, float]]:
    """Absolute time windows where the envelope changes on a scale much shorter than the pulse."""
    shape, start, length = pulse.shape, pulse.start_s, pulse.duration_s
    if shape.kind == "gaussian":
        sigma = envelopes._sigma(shape, length)
        if 12 * sigma < length / 4:
            centre = start + length / 2
            return [(centre - 6 * sigma, centre + 6 * sigma)]
    if shape.kind == "ramped":
        ramp = shape.param("ramp", 0.0)
        if 0 < ramp < length / 8:
            return [(start, start + ramp), (start + length - ramp, start + length)]
    return []


def _distinct_steps(edges: list[float], span: float) -> list[tuple[float, float]]:
    """Consecutive pairs of the sorted edges, merging edges closer than 1e-9 of the segment."""
    ordered = sorted(edges)
    kept = [ordered[0]]
    for t in ordered[1:]:
        if t - kept[-1] > 1e-9 * span:
            kept.append(t)
    kept[-1] = ordered[-1]
    return list(zip(kept, kept[1:]))


_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(4)


def _step_average(pulse: Event, a: float, b: float) -> float:
    """The envelope's mean over [a, b] (4-point Gauss–Legendre)."""
    if pulse.shape.kind == "square":
        return 1.0
    times = (a + b) / 2 + (b - a) / 2 * _NODES - pulse.start_s
    values = envelopes.envelope(pulse.shape, pulse.duration_s, np.clip(times, 0.0, pulse.duration_s))
    return float(np.dot(_WEIGHTS, values) / 2)


def _couplings(program: Program, active: list[Event], index: dict[str, int], a: float, b: float, ladder: bool):
    """(couplings, light shifts) of the pulses playing over the step [a, b]."""
    couplings, shifts = [], []
    for pulse in active:
        drive = program.rig.drives[pulse.drive]
        lower, upper = TRANSITION[drive.kind]
        scale = _step_average(pulse, a, b)
        omega, delta = 2 * math.pi * pulse.rabi_hz * scale, 2 * math.pi * pulse.detuning_hz
        legs = leg_rabi(drive, omega)
        for site in (index[s] for s in pulse.targets if s in index):
            if legs is None:
                couplings.append(Drive1(site, lower, upper, omega, delta, pulse.phase_rad, drive.name, pulse.index))
            elif ladder:
                couplings += [Drive1(site, G1, INTERMEDIATE, legs[0], legs[2], 0.0, drive.name, pulse.index),
                              Drive1(site, INTERMEDIATE, RYD, legs[1], delta, pulse.phase_rad, drive.name, pulse.index)]
            else:
                couplings.append(Drive1(site, lower, upper, omega, delta, pulse.phase_rad, drive.name, pulse.index))
                shifts += [replace(x, event=pulse.index) for x in light_shifts(site, *legs)]
    return tuple(couplings), tuple(shifts)


def leg_rabi(drive, omega_eff: float) -> tuple[float, float, float] | None:
    """Leg Rabi frequencies Ω₁, Ω₂ and intermediate detuning Δ (rad/s) for an effective Ω.

    Ω_eff = Ω₁Ω₂/(2Δ) (adiabatic elimination); the legs keep the rig's ratio
    lower_rabi/upper_rabi (1 when not declared). None unless the drive declares an
    intermediate detuning and leg Rabi frequencies.
    """
    legs = drive.legs
    if drive.kind != "rydberg" or legs is None or not math.isfinite(legs.intermediate_detuning_hz) \
            or legs.lower_rabi_hz is None or legs.upper_rabi_hz is None:
        return None
    big_delta = 2 * math.pi * legs.intermediate_detuning_hz
    ratio = legs.lower_rabi_hz / legs.upper_rabi_hz
    product = 2 * abs(big_delta) * omega_eff
    upper = math.sqrt(product / ratio)
    return (ratio * upper, upper, big_delta)


def light_shifts(site: int, omega1: float, omega2: float, big_delta: float) -> list[LevelShift]:
    """AC Stark shifts left by eliminating |e⟩: +Ω₁²/(4Δ) on |1⟩ and +Ω₂²/(4Δ) on |r⟩ (derived),
    with the admixture (Ω/2Δ)² of |e⟩ that makes each level scatter."""
    return [LevelShift(site, G1, omega1**2 / (4 * big_delta), scatter=(omega1 / (2 * big_delta)) ** 2),
            LevelShift(site, RYD, omega2**2 / (4 * big_delta), scatter=(omega2 / (2 * big_delta)) ** 2)]


# ---- operators -------------------------------------------------------------------
def embed(op: np.ndarray, site: int, size: int) -> np.ndarray:
    """A single-atom operator acting on `site` of `size` atoms (site 0 is leftmost)."""
    out = np.array([[1.0 + 0j]])
    for k in range(size):
        out = np.kron(out, op if k == site else np.eye(op.shape[0]))
    return out


def projector(level: int, dim: int = DIM) -> np.ndarray:
    p = np.zeros((dim, dim), dtype=complex)
    p[level, level] = 1.0
    return p


def hamiltonian(model: Model, segment: Segment) -> np.ndarray:
    """H/ħ (rad/s) of one segment, as a dense matrix."""
    n, dim = model.size, model.dim
    h = np.zeros((dim**n, dim**n), dtype=complex)
    for s in segment.shifts:
        h += embed(s.shift * projector(s.level, dim), s.site, n)
    for c in segment.couplings:
        single = np.zeros((dim, dim), dtype=complex)
        single[c.upper, c.lower] = 0.5 * c.omega * np.exp(1j * c.phase)
        single[c.lower, c.upper] = 0.5 * c.omega * np.exp(-1j * c.phase)
        single[c.upper, c.upper] -= c.delta
        h += embed(single, c.site, n)
    return h + interaction_hamiltonian(model, segment)


def interaction_hamiltonian(model: Model, segment: Segment | None = None) -> np.ndarray:
    """Σ V_ij |rr⟩⟨rr| (diagonal, rad/s), with the V in force during `segment` if given."""
    n, dim = model.size, model.dim
    diag = np.zeros(dim**n)
    values = model.interactions if segment is None else segment_interactions(model, segment)
    for (i, j), v in values.items():
        diag += v * np.real(np.diag(embed(projector(RYD, dim), i, n) @ embed(projector(RYD, dim), j, n)))
    return np.diag(diag).astype(complex)
