"""Noise sources declared in the rig: dissipators, and per-shot samples.

Markovian sources are Lindblad jump operators √Γ|target⟩⟨source| (`Jump`):
* ``decay``: each Rydberg level decays at Γ = 1/τ (radiative plus black-body at
  the rig's ``environment`` temperature, from the alkali Rydberg calculator). A
  fraction ``decay_to_qubit`` of the species (default 0) returns into the qubit
  states, split equally between |0⟩ and |1⟩ (documented simplification of the
  cascade); the rest leaves the qubit space into |x⟩.
* ``dephasing``: white laser frequency noise with Lorentzian linewidth Δν (FWHM)
  dephases the |1⟩–|r⟩ coherence at γ = πΔν: L = √(2γ)|r⟩⟨r|.
* ``scattering``: photon scattering off the intermediate state of a two-photon
  drive while it plays, at Γ_e(Ω₁/2Δ)² from |1⟩ and Γ_e(Ω₂/2Δ)² from |r⟩
  (adiabatic elimination); counted as loss. In ladder mode |e⟩ decays instead.

Quasi-static and coloured sources are drawn per shot from one seeded stream.
Every shot draws every number, used or not, so that runs with different
sources see the same samples (common random numbers make budgets fair):
* ``intensity``: each drive's Rabi frequency scaled by (1 + σξ), and by the
  Gaussian beam profile exp(−ρ²/w²) at the atom's thermal offset ρ from the
  beam axis (drive ``waist``; beams taken centred on the trap, along its axis);
* ``doppler``: Rydberg detuning + k_eff·v, v ~ N(0, k_B T/m),
  k_eff = |k₁ − k₂| (counter-propagating legs) or k₁ + k₂ (co-propagating); with a
  trap switch in the rig, per segment along a harmonic (traps on) or ballistic
  (traps off) track, laser phase −k_eff·(x(t) − x₀) (``_doppler_tracks``);
* ``motion``: thermal position spread in the trap, σ = √(k_B T/m)/ω (radial,
  axial trap frequencies), moves pair distances and so V = C6/R⁶;
* ``detuning_error``: microwave/Raman detuning off by ε·ξ per shot (ε the drive's
  ``detuning_error``, an rms value);
* ``t2_star``: quasi-static qubit frequency offset per atom, rms √2/T2*, so that
  Ramsey contrast decays as exp(−(t/T2*)²);
* ``field_noise``: a classical field modulation of the qubit frequency,
  A·sin(2πf t + φ) with φ uniform per shot (A, f the species' ``field_noise``,
  ``field_noise_freq``) — what decoupling trains filter;
* ``laser_noise``: the servo bump of a Rydberg laser's frequency-noise spectrum,
  S(f) = h·(Δν/π)·exp(−(f − f_b)²/2w²) (height h relative to the white floor
  Δν/π), sampled per shot as a sum of Gaussian-weighted quadratures;
* ``preparation``: an atom starts lost (|x⟩) with the species' ``prep_error``;
* ``imaging``: a bright atom is lost during imaging with the imaging ``loss``;
  readout flips (false positives/negatives) are applied to the reported records;
* ``crosstalk``: the imaging light of one species, far detuned for the other,
  dephases atoms of the other species that scatter a photon (sim/crosstalk.py).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..program.model import Program
from .model import G0, G1, INTERMEDIATE, LADDER_DIM, LOST, RYD, LevelShift, Model, Segment

MARKOVIAN = ("decay", "dephasing", "scattering")  # Lindblad jumps
SAMPLED = ("laser_noise", "intensity", "doppler", "motion", "detuning_error", "t2_star", "field_noise",
           "preparation", "imaging", "crosstalk")  # drawn per shot
SOURCES = MARKOVIAN + SAMPLED
BOLTZMANN = 1.380649e-23  # J/K (SI, exact)
BUMP_COMPONENTS = 48  # quadratures spanning a servo bump
BUMP_SPAN = 3.0  # the bump is sampled over f_b ± BUMP_SPAN·w
STEPS_PER_PERIOD = 16  # sub-steps per period of the fastest time-dependent noise


@dataclass(frozen=True)
class Jump:
    """A Lindblad operator √rate·|target⟩⟨source| on one site (rate in 1/s)."""

    site: int
    source: int
    target: int
    rate: float


def parse_sources(text: str) -> tuple[str, ...]:
    """`off`, `all` or a comma-separated list of source names."""
    if text in ("off", "none", ""):
        return ()
    if text == "all":
        return SOURCES
    chosen = tuple(s.strip() for s in text.split(","))
    unknown = [s for s in chosen if s not in SOURCES]
    if unknown:
        raise ValueError(f"unknown noise source(s) {', '.join(unknown)}; known: {', '.join(SOURCES)}")
    return chosen


def is_sampled(sources: tuple[str, ...]) -> bool:
    """True when the sources need Monte Carlo shots."""
    return any(s in SAMPLED for s in sources)


# ---- Markovian -------------------------------------------------------------------
def rydberg_sites(program: Program, model: Model) -> dict[int, str]:
    """Site index → species for atoms that some Rydberg drive couples."""
    driven = {c.site for seg in model.segments for c in seg.couplings
              if c.drive and program.rig.drives[c.drive].kind == "rydberg"}
    return {i: model.species[i] for i in sorted(driven)}


def decay_rate_hz(program: Program, species: str) -> float:
    """Γ (1/s) of the species' Rydberg level at the rig's environment temperature."""
    from ..atoms import rydberg
    sp = program.rig.species[species]
    return 1.0 / rydberg.lifetime_s(sp.data, sp.rydberg, program.rig.environment_k).total_s


def dephasing_rate_hz(program: Program, species: str) -> float:
    """γ = π·Δν summed over the species' Rydberg drives' linewidths (1/s)."""
    return sum(math.pi * d.extra.get("linewidth", 0.0) for d in program.rig.drives.values()
               if d.kind == "rydberg" and d.species == species)


def jumps(program: Program, model: Model, sources: tuple[str, ...]) -> list[Jump]:
    """The Lindblad operators of the Markovian sources chosen."""
    out = []
    for site, species in rydberg_sites(program, model).items():
        if "decay" in sources:
            gamma = decay_rate_hz(program, species)
            back = program.rig.species[species].extra.get("decay_to_qubit", 0.0)
            out.append(Jump(site, RYD, LOST, gamma * (1 - back)))
            if back > 0:
                out += [Jump(site, RYD, G0, gamma * back / 2), Jump(site, RYD, G1, gamma * back / 2)]
        gamma = dephasing_rate_hz(program, species) if "dephasing" in sources else 0.0
        if gamma > 0:
            out.append(Jump(site, RYD, RYD, 2 * gamma))
        if "scattering" in sources and model.dim == LADDER_DIM:
            out.append(Jump(site, INTERMEDIATE, LOST, intermediate_width(program, species)))
    return [j for j in out if j.rate > 0]


def intermediate_width(program: Program, species: str) -> float:
    """Γ_e (1/s) of the intermediate level of the species' two-photon excitation: the
    D2 level, or the next P3/2 level when the lower leg is blue (< 500 nm)."""
    from ..atoms import rydberg
    data = program.rig.species[species].data
    legs = [d.legs for d in program.rig.drives.values() if d.kind == "rydberg" and d.species == species and d.legs]
    blue = bool(legs) and legs[0].lower_wavelength_m < 500e-9
    level = rydberg.default_intermediate(data, "blue" if blue else "d2")
    return 2 * math.pi * rydberg.intermediate_linewidth_hz(data, level.n, level.l, level.j)


def collapse_operators(program: Program, model: Model, sources: tuple[str, ...]) -> list[np.ndarray]:
    """The same jumps as dense operators on the full space (for the QuTiP reference)."""
    from .model import embed
    ops = []
    for j in jumps(program, model, sources):
        single = np.zeros((model.dim, model.dim), dtype=complex)
        single[j.target, j.source] = math.sqrt(j.rate)
        ops.append(embed(single, j.site, model.size))
    return ops


# ---- deterministic preparation of the model ----------------------------------------
def prepare(program: Program, model: Model, sources: tuple[str, ...]) -> Model:
    """The model the shots perturb: scattering on or off, time grid fine enough for the
    time-dependent sources."""
    scattering = "scattering" in sources and model.dim != LADDER_DIM
    widths = {sp: intermediate_width(program, sp) for sp in set(model.species)
              if scattering and program.rig.species[sp].rydberg is not None}

    def rate(x: LevelShift) -> float:
        return widths[model.species[x.site]] * x.scatter if scattering and x.scatter else 0.0
    segments = tuple(replace(s, shifts=tuple(replace(x, loss_rate=rate(x)) for x in s.shifts))
                     for s in model.segments)
    laser, field = _noise_steps(program, model, sources)
    bumped = set(_bumped_drives(program, model)) if "laser_noise" in sources else set()
    out = []
    for seg in segments:
        step = laser if any(c.drive in bumped for c in seg.couplings) else math.inf
        out += _split(seg, min(step, field))
    return replace(model, segments=tuple(out))


def _noise_steps(program: Program, model: Model, sources: tuple[str, ...]) -> tuple[float, float]:
    """Longest driven sub-steps that still follow the laser's servo bump and the field noise."""
    laser = field = math.inf
    if "laser_noise" in sources:
        for drive in _bumped_drives(program, model):
            d = program.rig.drives[drive]
            fastest = d.extra["servo_bump"] + BUMP_SPAN * d.extra.get("servo_width", 0.0)
            laser = min(laser, 1 / (STEPS_PER_PERIOD * fastest))
    if "field_noise" in sources:
        for sp in set(model.species):
            extra = program.rig.species[sp].extra
            if extra.get("field_noise", 0.0) > 0 and extra.get("field_noise_freq", 0.0) > 0:
                field = min(field, 1 / (STEPS_PER_PERIOD * extra["field_noise_freq"]))
    return laser, field


def _split(segment: Segment, step: float) -> list[Segment]:
    if not segment.couplings or segment.duration_s <= step:
        return [segment]
    count = math.ceil(segment.duration_s / step)
    width = segment.duration_s / count
    return [replace(segment, start_s=segment.start_s + k * width, duration_s=width) for k in range(count)]


def _bumped_drives(program: Program, model: Model) -> list[str]:
    return [n for n in model_drives(model) if program.rig.drives[n].kind == "rydberg"
            and program.rig.drives[n].extra.get("servo_bump", 0.0) > 0
            and program.rig.drives[n].extra.get("servo_height", 0.0) > 0]


# ---- per-shot draws -----------------------------------------------------------------
@dataclass(frozen=True)
class Draws:
    """The random numbers of all shots, stacked (standard normal unless said otherwise)."""

    intensity: np.ndarray  # (shots, drives)
    offsets: np.ndarray  # (shots, sites, 3) thermal position offsets in units of σ
    velocity: np.ndarray  # (shots, sites) along k_eff, in units of σ_v
    detuning: np.ndarray  # (shots, drives)
    qubit: np.ndarray  # (shots, sites) quasi-static qubit offsets
    field_phase: np.ndarray  # (shots,) uniform in [0, 2π)
    bumps: np.ndarray  # (shots, drives, BUMP_COMPONENTS, 2) quadratures
    prepared: np.ndarray  # (shots, sites) uniform
    imaging: tuple[np.ndarray, ...]  # per imaging segment, (shots, imaged sites) uniform
    field_offset: np.ndarray | None = None  # (shots,) shared quasi-static field, units of field_rms (sim/shared.py)
    crosstalk: np.ndarray | None = None  # (shots, images, sites, 3) uniform (sim/crosstalk.py)

    @property
    def count(self) -> int:
        return self.intensity.shape[0]


def model_drives(model: Model) -> list[str]:
    return sorted({c.drive for seg in model.segments for c in seg.couplings if c.drive})


def draw(model: Model, shots: int, rng: np.random.Generator) -> Draws:
    """Every shot's numbers, shot after shot in a fixed order that does not depend on the sources."""
    drives, n = len(model_drives(model)), model.size
    images = [sum(name in seg.image.targets for name in model.sites) for seg in model.segments if seg.image]
    rows = []
    for _ in range(shots):
        rows.append((rng.standard_normal(drives), rng.standard_normal((n, 3)), rng.standard_normal(n),
                     rng.standard_normal(drives), rng.standard_normal(n), 2 * math.pi * rng.random(),
                     rng.standard_normal((drives, BUMP_COMPONENTS, 2)), rng.random(n),
                     tuple(rng.random(k) for k in images)))
    columns = list(zip(*rows))
    # Drawn after every shot's row, so that the numbers above keep their values.
    crosstalk = rng.random((shots, len(model.images), n, 3))
    return Draws(*(np.array(c) for c in columns[:8]),
                 tuple(np.array([r[8][i] for r in rows]) for i in range(len(images))), None, crosstalk)


@dataclass(frozen=True)
class Shots:
    """Per-shot parameters of every segment, as arrays over shots (one row when not sampled).

    couplings[k]: (rows, C, 3) Ω, Δ, φ of segment k's couplings; shifts[k]: (rows, S, 2)
    shift and loss rate of the levels `shift_levels[k]`; interactions: (rows, P) pair
    shifts of the `pairs`, all in rad/s.
    """

    model: Model
    couplings: tuple[np.ndarray, ...]
    shifts: tuple[np.ndarray, ...]
    shift_levels: tuple[tuple[tuple[int, int], ...], ...]
    pairs: tuple[tuple[int, int], ...]
    interactions: np.ndarray
    initial: tuple[tuple[int, ...], ...]
    image_draws: tuple[np.ndarray, ...] = ()
    # Per segment, None or (rows, P) pair shifts replacing `interactions` there (a move, a field).
    segment_interactions: tuple[np.ndarray | None, ...] = ()

    @property
    def count(self) -> int:
        return len(self.initial)

    def rows(self, lo: int, hi: int) -> "Shots":
        """The shots lo..hi (all of them when the parameters are shared)."""
        def cut(a):
            return a[lo:hi] if a.shape[0] > 1 else a
        return Shots(self.model, tuple(map(cut, self.couplings)), tuple(map(cut, self.shifts)), self.shift_levels,
                     self.pairs, cut(self.interactions), self.initial[lo:hi],
                     tuple(d[lo:hi] for d in self.image_draws), _cut_each(self.segment_interactions, cut))

    def take(self, indices: np.ndarray) -> "Shots":
        """The shots at `indices` (shared parameters stay shared)."""
        def cut(a):
            return a[indices] if a.shape[0] > 1 else a
        return Shots(self.model, tuple(map(cut, self.couplings)), tuple(map(cut, self.shifts)), self.shift_levels,
                     self.pairs, cut(self.interactions), tuple(self.initial[k] for k in indices),
                     tuple(d[indices] for d in self.image_draws), _cut_each(self.segment_interactions, cut))

    def interactions_at(self, k: int) -> np.ndarray:
        """(rows, P) pair shifts in force during segment k."""
        if self.segment_interactions and self.segment_interactions[k] is not None:
            return self.segment_interactions[k]
        return self.interactions

    def shot_model(self, k: int) -> Model:
        """The model of shot k, for the reference path."""
        def row(a):
            return a[k] if a.shape[0] > 1 else a[0]
        segments = []
        for index, (seg, c, sh, levels) in enumerate(zip(self.model.segments, self.couplings, self.shifts,
                                                         self.shift_levels)):
            couplings = tuple(replace(x, omega=float(v[0]), delta=float(v[1]), phase=float(v[2]))
                              for x, v in zip(seg.couplings, row(c)))
            shifts = tuple(LevelShift(site, level, float(v[0]), float(v[1])) for (site, level), v in zip(levels, row(sh)))
            pairs = seg.interactions
            if pairs is not None:
                pairs = tuple((p, float(v), r) for (p, _, r), v in zip(pairs, row(self.interactions_at(index))))
            segments.append(replace(seg, couplings=couplings, shifts=shifts, interactions=pairs))
        interactions = dict(zip(self.pairs, map(float, row(self.interactions))))
        return replace(self.model, segments=tuple(segments), interactions=interactions)


def _cut_each(arrays: tuple, cut) -> tuple:
    return tuple(None if a is None else cut(a) for a in arrays)


def nominal_shots(model: Model) -> Shots:
    """One unperturbed shot."""
    return sample(None, model, (), None)


def sample(program: Program | None, model: Model, sources: tuple[str, ...], draws: Draws | None) -> Shots:
    """The shots' parameters: the model perturbed by the drawn numbers of the chosen sources."""
    pairs = tuple(sorted(model.interactions))
    rows = draws.count if draws is not None else 1
    on = set(sources) if draws is not None else set()
    displaced = _displacements(program, model, draws) if on & {"motion", "intensity"} else None
    scale = _rabi_scales(program, model, draws, displaced) if "intensity" in on else None
    offsets = _detuning_offsets(program, model, on, draws) if on & {"doppler", "detuning_error"} else None
    doppler = _doppler_tracks(program, model, draws) if "doppler" in on and model.traps is not None else None
    qubit = _qubit_offsets(program, model, draws) if "t2_star" in on else None
    field = _field(program, model, draws) if "field_noise" in on else None
    if "crosstalk" in on and model.images:
        from .crosstalk import kicks
        cross = kicks(program, model, draws)
    else:
        cross = None
    phases = _laser_phases(program, model, draws) if "laser_noise" in on else {}
    drives = {d: i for i, d in enumerate(model_drives(model))}
    couplings, shifts, levels = [], [], []
    for k, seg in enumerate(model.segments):
        c = np.tile(np.array([[x.omega, x.delta, x.phase] for x in seg.couplings]).reshape(1, -1, 3), (rows, 1, 1))
        t_mid = seg.start_s + seg.duration_s / 2
        for j, x in enumerate(seg.couplings):
            d = drives[x.drive]
            if scale is not None:
                c[:, j, 0] *= scale[:, d, x.site]
            if offsets is not None:
                c[:, j, 1] += offsets[:, d, x.site]
            if doppler is not None and k in doppler[0] and program.rig.drives[x.drive].kind == "rydberg":
                c[:, j, 1] += doppler[0][k][:, x.site]
                c[:, j, 2] += doppler[1][k][:, x.site]
            if x.drive in phases:
                c[:, j, 2] += phases[x.drive](t_mid)
        sh = [np.tile([[x.shift, x.loss_rate] for x in seg.shifts], (rows, 1)).reshape(rows, -1, 2)]
        lv = [(x.site, x.level) for x in seg.shifts]
        if qubit is not None or field is not None or cross is not None:
            extra = (qubit if qubit is not None else 0.0) + (field(seg) if field is not None else 0.0) \
                + (cross(seg) if cross is not None else 0.0)
            sh.append(np.stack([extra * np.ones((rows, model.size)), np.zeros((rows, model.size))], axis=-1))
            lv += [(i, G1) for i in range(model.size)]
        couplings.append(_shared(c))
        shifts.append(_shared(np.concatenate(sh, axis=1)))
        levels.append(tuple(lv))
    v = np.tile([[model.interactions[p] for p in pairs]], (rows, 1)).reshape(rows, len(pairs))
    if "motion" in on:
        v = _interactions(program, model, pairs, displaced)
    moved = tuple(None if seg.interactions is None else _shared(_moved(program, model, seg, pairs, rows, displaced,
                                                                       "motion" in on))
                  for seg in model.segments)
    initial = _initial_levels(program, model, on, draws)
    image_draws = draws.imaging if "imaging" in on else ()
    return Shots(model, tuple(couplings), tuple(shifts), tuple(levels), pairs, _shared(v), initial, image_draws,
                 moved if any(m is not None for m in moved) else ())


def _moved(program, model: Model, seg: Segment, pairs, rows: int, displaced, motion: bool) -> np.ndarray:
    """(rows, P) pair shifts of a segment after a move, each scaled by (R/R')⁶ for the thermal
    offsets when the motion source is on."""
    table = {p: (v, r) for p, v, r in seg.interactions}
    out = np.tile([[table[p][0] for p in pairs]], (rows, 1)).reshape(rows, len(pairs))
    if motion:
        for k, p in enumerate(pairs):
            out[:, k] *= _distance_factor(program, model, p, table[p][1], displaced)
    return out


def _shared(a: np.ndarray) -> np.ndarray:
    """One row when every shot has the same values (the engine then propagates once)."""
    return a[:1] if a.shape[0] > 1 and np.all(a == a[:1]) else a


def _sigma_position(program: Program, species: str) -> np.ndarray:
    """Thermal rms offsets (x, y, z) in a harmonic trap: √(k_B T/m)/ω (classical)."""
    sp = program.rig.species[species]
    sigma_v = math.sqrt(BOLTZMANN * sp.temperature_k / sp.data.mass_kg)
    radial = 2 * math.pi * sp.extra.get("trap_radial", 0.0)
    axial = 2 * math.pi * sp.extra.get("trap_axial", 0.0)
    return np.array([sigma_v / radial if radial else 0.0] * 2 + [sigma_v / axial if axial else 0.0])


def _displacements(program: Program, model: Model, draws: Draws) -> np.ndarray:
    """(shots, sites, 3) thermal offsets of each atom from its site (m)."""
    return np.array([_sigma_position(program, sp) for sp in model.species])[None] * draws.offsets


def _rabi_scales(program, model, draws: Draws, displaced) -> np.ndarray:
    """(shots, drives, sites): (1 + σξ) times the beam profile at the atom's offset."""
    out = np.ones((draws.count, len(model_drives(model)), model.size))
    for k, drive in enumerate(model_drives(model)):
        d = program.rig.drives[drive]
        out[:, k, :] = 1.0 + d.extra.get("intensity_noise", 0.0) * draws.intensity[:, k:k + 1]
        waist = d.extra.get("waist", 0.0)
        if waist:
            out[:, k, :] *= np.exp(-(displaced[:, :, 0] ** 2 + displaced[:, :, 1] ** 2) / waist**2)
    return out


def _detuning_offsets(program, model, on: set, draws: Draws) -> np.ndarray:
    """(shots, drives, sites) detuning added to each coupling (rad/s)."""
    out = np.zeros((draws.count, len(model_drives(model)), model.size))
    for k, drive in enumerate(model_drives(model)):
        d = program.rig.drives[drive]
        if d.kind == "rydberg" and "doppler" in on and model.traps is None:  # else _doppler_tracks
            sigma = np.array([doppler_sigma_rad_s(program, sp) for sp in model.species])
            out[:, k, :] += sigma[None] * draws.velocity
        if d.kind != "rydberg" and "detuning_error" in on:
            out[:, k, :] += 2 * math.pi * d.extra.get("detuning_error", 0.0) * draws.detuning[:, k:k + 1]
    return out


def _doppler_tracks(program, model: Model, draws: Draws) -> tuple[dict, dict]:
    """Doppler detuning and extra coupling phase, (shots, sites) in rad/s and rad, of every
    segment k with a coupling: ({k: detuning}, {k: phase}).

    Each atom follows one track through the whole sequence (sim/doppler_track.py): harmonic
    while the traps are on (along the radial trap frequency; free flight when the species
    declares none), ballistic while they are off, with its position and velocity continuous
    at every switch. It starts thermal: x₀ = σ_x·ξ (the same number as the `motion` source's
    offset along x), v₀ = σ_v·ξ'. The engine's coupling phase is φ − Δt (docs/simulation.md),
    so the laser phase −k_eff·(x(t) − x₀) takes the opposite sign of the track's phase.
    """
    from . import doppler_track
    driven = [k for k, seg in enumerate(model.segments) if seg.couplings]
    spans = [(model.segments[k].start_s, model.segments[k].duration_s) for k in driven]
    detuning = np.zeros((len(driven), draws.count, model.size))
    phase = np.zeros_like(detuning)
    for species in set(model.species):
        columns = [i for i, sp in enumerate(model.species) if sp == species]
        k_eff, sigma_v = _k_eff(program, species), _sigma_velocity(program, species)
        if not k_eff or not sigma_v:
            continue
        omega = 2 * math.pi * program.rig.species[species].extra.get("trap_radial", 0.0)
        x0 = _sigma_position(program, species)[0] * draws.offsets[:, columns, 0]
        v0 = sigma_v * draws.velocity[:, columns]
        switches = list(model.traps) if omega > 0 else [(0.0, False)]
        d, p = doppler_track.segment_offsets(k_eff, x0, v0, omega or 1.0, switches, spans)
        detuning[:, :, columns], phase[:, :, columns] = d, -p
    return dict(zip(driven, detuning)), dict(zip(driven, phase))


def _qubit_offsets(program, model, draws: Draws) -> np.ndarray:
    """(shots, sites) quasi-static qubit frequency offsets, rms √2/T2* (rad/s)."""
    t2 = np.array([program.rig.species[sp].extra.get("t2_star", 0.0) for sp in model.species])
    rms = np.divide(math.sqrt(2), t2, out=np.zeros_like(t2), where=t2 > 0)
    return rms[None] * draws.qubit


def _field(program, model, draws: Draws):
    """Mean of 2πA·sin(2πft + φ) over a segment, (shots, sites) in rad/s: exact phase for waits."""
    extra = [program.rig.species[sp].extra for sp in model.species]
    amplitude = np.array([2 * math.pi * e.get("field_noise", 0.0) for e in extra])[None]
    w = np.array([2 * math.pi * e.get("field_noise_freq", 0.0) for e in extra])[None]
    phi = draws.field_phase[:, None]
    # The shared quasi-static offset: each species' sensitivity times the shot's field (sim/shared.py).
    per_field = np.array([2 * math.pi * e.get("field_sensitivity", 0.0) for e in extra])[None]
    offset = per_field * program.rig.field_rms_g * (draws.field_offset[:, None] if draws.field_offset is not None
                                                    else 0.0)

    def shift(seg: Segment) -> np.ndarray:
        a, b = seg.start_s, seg.start_s + seg.duration_s
        if seg.duration_s == 0:
            return amplitude * np.sin(w * a + phi) + offset
        with np.errstate(divide="ignore", invalid="ignore"):
            mean = (np.cos(w * a + phi) - np.cos(w * b + phi)) / (w * (b - a))
        return amplitude * np.where(w > 0, mean, np.sin(phi)) + offset
    return shift


def _laser_phases(program, model, draws: Draws) -> dict:
    """Drive → t ↦ (shots,) phase φ(t) = 2π∫δν dt of the servo-bump frequency noise (rad)."""
    index = {d: i for i, d in enumerate(model_drives(model))}
    out = {}
    for drive in _bumped_drives(program, model):
        freqs, amps = bump_components(program.rig.drives[drive])
        a, b = draws.bumps[:, index[drive], :, 0], draws.bumps[:, index[drive], :, 1]

        def phase(t, freqs=freqs, amps=amps, a=a, b=b):
            w = 2 * math.pi * freqs * t
            return (amps / freqs * (a * np.sin(w) - b * (np.cos(w) - 1))).sum(axis=1)
        out[drive] = phase
    return out


def bump_components(drive) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies f_k and rms amplitudes √(S(f_k)Δf) (Hz) of the servo bump's quadratures."""
    centre, width = drive.extra["servo_bump"], drive.extra.get("servo_width", 0.0) or drive.extra["servo_bump"] / 10
    low = max(centre - BUMP_SPAN * width, centre / BUMP_COMPONENTS)
    edges = np.linspace(low, centre + BUMP_SPAN * width, BUMP_COMPONENTS + 1)
    freqs, df = (edges[1:] + edges[:-1]) / 2, np.diff(edges)
    return freqs, np.sqrt(servo_psd(drive, freqs) * df)


def servo_psd(drive, f: np.ndarray) -> np.ndarray:
    """One-sided frequency-noise PSD of the servo bump (Hz²/Hz)."""
    floor = drive.extra.get("linewidth", 0.0) / math.pi
    centre, width = drive.extra["servo_bump"], drive.extra.get("servo_width", 0.0) or drive.extra["servo_bump"] / 10
    return drive.extra.get("servo_height", 0.0) * floor * np.exp(-((f - centre) ** 2) / (2 * width**2))


def _interactions(program: Program, model: Model, pairs, displaced: np.ndarray) -> np.ndarray:
    """(shots, pairs): V_ij·(R₀/R)⁶ with each atom moved by its thermal offset."""
    out = np.empty((displaced.shape[0], len(pairs)))
    for k, pair in enumerate(pairs):
        separation = (model.separations or {}).get(pair, ())
        out[:, k] = model.interactions[pair] * _distance_factor(program, model, pair, separation, displaced)
    return out


def _distance_factor(program: Program, model: Model, pair, separation, displaced: np.ndarray) -> np.ndarray:
    """(shots,) (R₀/R)⁶ for the separation r_j − r_i (the declared sites' when not given)."""
    i, j = pair
    if not len(separation):
        separation = np.subtract(program.sites[model.sites[j]].position_m, program.sites[model.sites[i]].position_m)
    separation = np.asarray(separation, float)
    r = np.linalg.norm(separation + displaced[:, j] - displaced[:, i], axis=1)
    return (np.linalg.norm(separation) / r) ** 6


def doppler_sigma_rad_s(program: Program, species: str) -> float:
    """k_eff·σ_v (rad/s): the rms Doppler shift of the two-photon transition."""
    return _k_eff(program, species) * _sigma_velocity(program, species)


def _k_eff(program: Program, species: str) -> float:
    """|k₁ − k₂| (counter-propagating legs) or k₁ + k₂ (1/m) of the species' first Rydberg drive
    with legs; 0 without one."""
    drives = [d for d in program.rig.drives.values() if d.kind == "rydberg" and d.species == species and d.legs]
    if not drives:
        return 0.0
    legs = drives[0].legs
    k1, k2 = 2 * math.pi / legs.lower_wavelength_m, 2 * math.pi / legs.upper_wavelength_m
    return abs(k1 - k2) if legs.counter_propagating else k1 + k2


def _sigma_velocity(program: Program, species: str) -> float:
    """√(k_B T/m) (m/s), thermal rms velocity along one axis; 0 at T = 0."""
    sp = program.rig.species[species]
    return math.sqrt(BOLTZMANN * sp.temperature_k / sp.data.mass_kg) if sp.temperature_k > 0 else 0.0


def _initial_levels(program, model: Model, on: set, draws: Draws | None) -> tuple:
    """All atoms in |0⟩, each lost instead with its species' preparation error."""
    if draws is None or "preparation" not in on:
        return ((G0,) * model.size,) * (draws.count if draws is not None else 1)
    prep = np.array([program.rig.species[sp].extra.get("prep_error", 0.0) for sp in model.species])
    return tuple(tuple(LOST if lost else G0 for lost in row) for row in draws.prepared < prep[None])


def image_loss(program: Program, sources: tuple[str, ...]) -> dict[str, float]:
    """Species → probability that a bright atom is lost while imaged."""
    if "imaging" not in sources:
        return {}
    return {img.species: img.loss for img in program.rig.imaging.values() if img.loss > 0}


def readout_errors(program: Program, species: str, sources: tuple[str, ...]) -> tuple[float, float]:
    """(false positive, false negative) probabilities of the species' imaging."""
    img = program.rig.imaging.get(species)
    if img is None or "imaging" not in sources:
        return 0.0, 0.0
    fp = img.extra.get("false_positive") or 0.0
    fn = img.extra.get("false_negative") or 0.0
    if not fp and not fn and img.fidelity < 1:
        fp = fn = 1 - img.fidelity  # one number: the same error both ways
    return fp, fn


def lossy_sites(program: Program, model: Model, sources: tuple[str, ...]) -> set[int]:
    """Sites that a sampled event (preparation, imaging loss) can put into |x⟩."""
    out = set()
    losses = image_loss(program, sources)
    for i, sp in enumerate(model.species):
        if "preparation" in sources and program.rig.species[sp].extra.get("prep_error", 0.0) > 0:
            out.add(i)
        if sp in losses and any(seg.image is not None and model.sites[i] in seg.image.targets
                                for seg in model.segments):
            out.add(i)
    return out


def binomial_error(p: float, shots: int) -> float:
    """Standard error of an estimated probability from `shots` repetitions: √(p(1−p)/N)."""
    return math.sqrt(max(p * (1 - p), 0.0) / shots)


__all__ = ["SOURCES", "Draws", "Jump", "Shots", "binomial_error", "collapse_operators", "draw", "jumps",
           "nominal_shots", "parse_sources", "prepare", "sample"]
