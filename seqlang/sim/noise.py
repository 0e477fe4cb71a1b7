"""Noise sources declared in the rig, as collapse operators or per-shot samples.

Markovian sources become Lindblad collapse operators:
* ``decay``: each Rydberg level decays at Γ = 1/τ (radiative plus black-body at
  the rig's ``environment`` temperature, from the alkali Rydberg calculator); all
  of it is taken out of the qubit space into |x⟩ (documented simplification: the
  cascade back into the ground manifold is slow and mostly ends outside the qubit
  pair).
* ``dephasing``: white laser frequency noise of a Rydberg drive with Lorentzian
  linewidth Δν (FWHM): the |1⟩–|r⟩ coherence decays at γ = πΔν (REFERENCES.md),
  L = √(2γ)|r⟩⟨r|.
Quasi-static sources are sampled once per shot with a seeded generator:
* ``intensity``: every pulse of a drive has its Rabi frequency scaled by (1 + σξ),
  ξ ~ N(0, 1), σ the drive's ``intensity_noise``;
* ``doppler``: each atom's Rydberg detuning moves by k_eff·v, v ~ N(0, k_B T/m),
  k_eff = |k₁ ∓ k₂| for counter- (co-) propagating legs;
* ``preparation``: with the species' ``prep_error`` an atom starts lost (|x⟩).
"""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..program.model import Program
from .model import G0, LOST, RYD, Model, embed

SOURCES = ("decay", "dephasing", "intensity", "doppler", "preparation")
MARKOVIAN = ("decay", "dephasing")
QUASI_STATIC = ("intensity", "doppler", "preparation")
BOLTZMANN = 1.380649e-23  # J/K (SI, exact)


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


def rydberg_sites(program: Program, model: Model) -> dict[int, str]:
    """Site index → Rydberg drive species for atoms that some Rydberg drive couples."""
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


def collapse_operators(program: Program, model: Model, sources: tuple[str, ...]) -> list[np.ndarray]:
    """Lindblad operators (√rate·L, rates in 1/s) of the Markovian sources chosen."""
    ops = []
    for site, species in rydberg_sites(program, model).items():
        if "decay" in sources:
            jump = np.zeros((model.dim, model.dim), dtype=complex)
            jump[LOST, RYD] = 1.0
            ops.append(math.sqrt(decay_rate_hz(program, species)) * embed(jump, site, model.size))
        gamma = dephasing_rate_hz(program, species) if "dephasing" in sources else 0.0
        if gamma > 0:
            proj = np.zeros((model.dim, model.dim), dtype=complex)
            proj[RYD, RYD] = 1.0
            ops.append(math.sqrt(2 * gamma) * embed(proj, site, model.size))
    return ops


def doppler_sigma_rad_s(program: Program, species: str) -> float:
    """k_eff·σ_v (rad/s): the rms Doppler shift of the two-photon transition."""
    sp = program.rig.species[species]
    drives = [d for d in program.rig.drives.values() if d.kind == "rydberg" and d.species == species and d.legs]
    if not drives or sp.temperature_k <= 0:
        return 0.0
    legs = drives[0].legs
    k1, k2 = 2 * math.pi / legs.lower_wavelength_m, 2 * math.pi / legs.upper_wavelength_m
    k_eff = abs(k1 - k2) if legs.counter_propagating else k1 + k2
    return k_eff * math.sqrt(BOLTZMANN * sp.temperature_k / sp.data.mass_kg)


def sample_model(program: Program, model: Model, sources: tuple[str, ...], rng: np.random.Generator) -> Model:
    """One shot's model: quasi-static Rabi scaling and Doppler detunings applied."""
    drives = sorted({c.drive for seg in model.segments for c in seg.couplings if c.drive})
    scale = {d: 1.0 + (program.rig.drives[d].extra.get("intensity_noise", 0.0) * rng.standard_normal()
                       if "intensity" in sources else 0.0) for d in drives}
    doppler = {i: (doppler_sigma_rad_s(program, sp) * rng.standard_normal() if "doppler" in sources else 0.0)
               for i, sp in enumerate(model.species)}
    segments = tuple(replace(seg, couplings=tuple(_perturb(program, c, scale, doppler) for c in seg.couplings))
                     for seg in model.segments)
    return replace(model, segments=segments)


def _perturb(program: Program, coupling, scale: dict, doppler: dict):
    if not coupling.drive:
        return coupling
    extra = doppler[coupling.site] if program.rig.drives[coupling.drive].kind == "rydberg" else 0.0
    return replace(coupling, omega=coupling.omega * scale[coupling.drive], delta=coupling.delta + extra)


def prepared_state(program: Program, model: Model, sources: tuple[str, ...], rng: np.random.Generator) -> np.ndarray:
    """|0…0⟩, with each atom lost instead with its species' preparation error."""
    levels = [LOST if "preparation" in sources
              and rng.random() < program.rig.species[sp].extra.get("prep_error", 0.0) else G0
              for sp in model.species]
    psi = np.zeros(model.dim**model.size, dtype=complex)
    psi[int(np.ravel_multi_index(levels, [model.dim] * model.size))] = 1.0
    return psi


def binomial_error(p: float, shots: int) -> float:
    """Standard error of an estimated probability from `shots` repetitions: √(p(1−p)/N)."""
    return math.sqrt(max(p * (1 - p), 0.0) / shots)


__all__ = ["SOURCES", "binomial_error", "collapse_operators", "parse_sources", "prepared_state", "sample_model"]
