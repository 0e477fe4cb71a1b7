"""Build the few-atom model from a program and its played timeline.

Per atom the levels are |0⟩, |1⟩ (the qubit), |r⟩ (Rydberg) and |x⟩ (lost).
In the frame rotating with each drive, a pulse on site i contributes

    H/ħ = (Ω/2)(e^{iφ}|b⟩⟨a| + h.c.) − Δ|b⟩⟨b|

with (a, b) = (0, 1) for microwave and Raman drives and (1, r) for Rydberg
drives, Ω = 2π·rabi_hz and Δ = 2π·detuning_hz. Every pair of atoms has
V_ij |rr⟩⟨rr| with V/h = C6/R⁶. Nothing here runs a solver.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from ..compile import envelopes
from ..compile.timeline import IMAGE, PULSE, Event, Timeline
from ..program.model import Program

LEVELS = ("0", "1", "r", "x")
DIM = len(LEVELS)
G0, G1, RYD, LOST = range(DIM)
TRANSITION = {"microwave": (G0, G1), "raman": (G0, G1), "rydberg": (G1, RYD)}
# Shaped pulses are played as this many piecewise-constant steps (midpoint samples)
# unless the drive's sample rate asks for fewer.
SHAPE_STEPS = 64


@dataclass(frozen=True)
class Drive1:
    """One coupling active in a segment: site index, levels, Ω, Δ (rad/s), φ."""

    site: int
    lower: int
    upper: int
    omega: float
    delta: float
    phase: float


@dataclass(frozen=True)
class Segment:
    """A time interval with constant couplings; `image` is set for a measurement point."""

    start_s: float
    duration_s: float
    couplings: tuple[Drive1, ...]
    image: Event | None = None


@dataclass(frozen=True)
class Model:
    """Sites in order, pair interactions (rad/s) and the segments to propagate."""

    sites: tuple[str, ...]
    species: tuple[str, ...]
    interactions: dict[tuple[int, int], float]
    segments: tuple[Segment, ...]

    @property
    def size(self) -> int:
        return len(self.sites)


def pair_interactions_hz(program: Program, sites: tuple[str, ...]) -> dict[tuple[str, str], float]:
    """V/h = C6/R⁶ for every pair of sites whose species have Rydberg levels."""
    from ..atoms import rydberg
    out = {}
    for a, b in itertools.combinations(sites, 2):
        sa, sb = program.sites[a], program.sites[b]
        spa, spb = program.rig.species[sa.species], program.rig.species[sb.species]
        if spa.rydberg is None or spb.rydberg is None:
            continue
        c6 = rydberg.c6_hz_m6(spa.data, spa.rydberg, spb.data, spb.rydberg)
        out[(a, b)] = rydberg.interaction_hz(c6, math.dist(sa.position_m, sb.position_m))
    return out


def build_model(program: Program, timeline: Timeline, sites: tuple[str, ...],
                interactions_hz: dict[tuple[str, str], float]) -> Model:
    """The model of the atoms in `sites` under the played `timeline`."""
    index = {name: i for i, name in enumerate(sites)}
    pairs = {(index[a], index[b]): 2 * math.pi * v for (a, b), v in interactions_hz.items()
             if a in index and b in index}
    relevant = [e for e in timeline.events if e.kind in (PULSE, IMAGE) and set(e.targets) & set(sites)]
    segments = _segments(program, relevant, index, timeline.duration_s)
    species = tuple(program.sites[s].species for s in sites)
    return Model(tuple(sites), species, pairs, tuple(segments))


def _tick(t: float, tick: float) -> int:
    return round(t / tick)


def _boundaries(events: list[Event], total: int, tick: float) -> list[int]:
    """Every start and end, in ticks (the played timeline is on the tick grid)."""
    times = {0, total}
    for e in events:
        times.add(_tick(e.start_s, tick))
        if e.kind == PULSE:
            times.add(_tick(e.end_s, tick))
    return sorted(t for t in times if 0 <= t <= total)


def _segments(program: Program, events: list[Event], index: dict[str, int], total_s: float) -> list[Segment]:
    tick = program.rig.tick_s
    pulses = [(e, _tick(e.start_s, tick), _tick(e.end_s, tick)) for e in events if e.kind == PULSE]
    images = [(e, _tick(e.start_s, tick)) for e in events if e.kind == IMAGE]
    times = _boundaries(events, _tick(total_s, tick), tick)
    out: list[Segment] = []
    for k0, k1 in zip(times, times[1:] + [None]):
        out += [Segment(k0 * tick, 0.0, (), e) for e, k in sorted(images, key=lambda x: x[0].index) if k == k0]
        if k1 is None:
            break
        active = [e for e, a, b in pulses if a <= k0 and b >= k1]
        out += _pulse_steps(program, active, index, k0 * tick, k1 * tick)
    return out


def _pulse_steps(program: Program, active: list[Event], index: dict[str, int], t0: float, t1: float):
    """One segment for square pulses; piecewise-constant steps where a shaped pulse plays."""
    if t1 <= t0:
        return []
    shaped = [p for p in active if p.shape.kind != "square"]
    steps = 1
    for p in shaped:
        rate = program.rig.drives[p.drive].sample_rate_hz
        steps = max(steps, min(SHAPE_STEPS, max(1, round((t1 - t0) * rate))))
    edges = np.linspace(t0, t1, steps + 1)
    return [Segment(a, b - a, _couplings(program, active, index, (a + b) / 2)) for a, b in zip(edges, edges[1:])]


def _couplings(program: Program, active: list[Event], index: dict[str, int], t_mid: float) -> tuple[Drive1, ...]:
    out = []
    for pulse in active:
        drive = program.rig.drives[pulse.drive]
        lower, upper = TRANSITION[drive.kind]
        scale = float(envelopes.envelope(pulse.shape, pulse.duration_s, t_mid - pulse.start_s))
        omega = 2 * math.pi * pulse.rabi_hz * scale
        for site in pulse.targets:
            if site in index:
                out.append(Drive1(index[site], lower, upper, omega, 2 * math.pi * pulse.detuning_hz, pulse.phase_rad))
    return tuple(out)


# ---- operators -------------------------------------------------------------------
def embed(op: np.ndarray, site: int, size: int) -> np.ndarray:
    """A single-atom operator acting on `site` of `size` atoms (site 0 is leftmost)."""
    out = np.array([[1.0 + 0j]])
    for k in range(size):
        out = np.kron(out, op if k == site else np.eye(DIM))
    return out


def projector(level: int) -> np.ndarray:
    p = np.zeros((DIM, DIM), dtype=complex)
    p[level, level] = 1.0
    return p


def hamiltonian(model: Model, segment: Segment) -> np.ndarray:
    """H/ħ (rad/s) of one segment, as a dense matrix."""
    n = model.size
    h = np.zeros((DIM**n, DIM**n), dtype=complex)
    for c in segment.couplings:
        single = np.zeros((DIM, DIM), dtype=complex)
        single[c.upper, c.lower] = 0.5 * c.omega * np.exp(1j * c.phase)
        single[c.lower, c.upper] = 0.5 * c.omega * np.exp(-1j * c.phase)
        single[c.upper, c.upper] -= c.delta
        h += embed(single, c.site, n)
    return h + interaction_hamiltonian(model)


def interaction_hamiltonian(model: Model) -> np.ndarray:
    """Σ V_ij |rr⟩⟨rr| (diagonal, rad/s)."""
    n = model.size
    diag = np.zeros(DIM**n)
    for (i, j), v in model.interactions.items():
        diag += v * np.real(np.diag(embed(projector(RYD), i, n) @ embed(projector(RYD), j, n)))
    return np.diag(diag).astype(complex)
