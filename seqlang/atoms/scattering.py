"""Photon scattering of far-detuned light: imaging light of one species on the other.

The scattering rate of an atom in light of angular frequency ω and intensity I,
from each D line treated as a two-level transition with its counter-rotating
term (Grimm, Weidemüller & Ovchinnikov, Adv. At. Mol. Opt. Phys. 42, 95 (2000),
eq. 12), weighted by the line strengths 2/3 (D2) and 1/3 (D1) of an alkali S1/2
ground state (their eq. 19 in the rotating-wave limit):

    Γ_sc = Σ_lines f · (3πc² / 2ħω₀³) · (ω/ω₀)³ · (Γ/(ω₀ − ω) + Γ/(ω₀ + ω))² · I

>>> round(scattering_rate_hz(lookup("Na23"), 852.35e-9, 100.0), 3)    # doctest: +SKIP
"""
from __future__ import annotations

import math

from .species import SpeciesData, lookup  # noqa: F401  (lookup: for the doctest)

SPEED_OF_LIGHT = 299_792_458.0  # m/s (SI, exact)
HBAR = 1.054_571_817e-34  # J s (SI, exact h / 2π)
PLANCK = 6.626_070_15e-34  # J s (SI, exact)
D2_STRENGTH, D1_STRENGTH = 2 / 3, 1 / 3

# D1 lines (vacuum wavelength, natural linewidth Γ/2π): D. A. Steck, "Sodium D Line
# Data", "Rubidium 85/87 D Line Data", "Cesium D Line Data"; T. G. Tiecke, "Properties
# of Potassium"; M. E. Gehm, "Properties of 6Li" — values from memory (last digits).
D1_LINES = {
    "Li": (670.992e-9, 5.8724e6), "Na": (589.7558e-9, 9.765e6), "K": (770.1083e-9, 5.956e6),
    "Rb": (794.9789e-9, 5.746e6), "Cs": (894.5930e-9, 4.575e6),
}


def _line_rate(omega: float, wavelength_m: float, width_hz: float, intensity_w_m2: float) -> float:
    """Grimm et al. (2000) eq. 12: the two-level rate with the counter-rotating term (1/s)."""
    omega0 = 2 * math.pi * SPEED_OF_LIGHT / wavelength_m
    gamma = 2 * math.pi * width_hz
    prefactor = 3 * math.pi * SPEED_OF_LIGHT**2 / (2 * HBAR * omega0**3)
    return prefactor * (omega / omega0) ** 3 * (gamma / (omega0 - omega) + gamma / (omega0 + omega)) ** 2 \
        * intensity_w_m2


NEAR_WIDTHS = 100  # closer than this many linewidths the far-detuned form gives way to the saturated one


def _near_rate(omega: float, wavelength_m: float, width_hz: float, intensity_w_m2: float) -> float:
    """Steady-state two-level rate (Γ/2)·s/(1 + s + 4Δ²/Γ²), s = I/I_sat (Steck's D-line data)."""
    gamma = 2 * math.pi * width_hz
    delta = omega - 2 * math.pi * SPEED_OF_LIGHT / wavelength_m
    s = intensity_w_m2 / (math.pi * PLANCK * SPEED_OF_LIGHT * gamma / (3 * wavelength_m**3))
    return gamma / 2 * s / (1 + s + 4 * delta**2 / gamma**2)


def scattering_rate_hz(species: SpeciesData, light_wavelength_m: float, intensity_w_m2: float) -> float:
    """Photons per second that an atom of `species` scatters out of light far from its D lines
    (within NEAR_WIDTHS linewidths of a line, that line's saturated two-level rate instead)."""
    omega = 2 * math.pi * SPEED_OF_LIGHT / light_wavelength_m
    lines = ((D2_STRENGTH, species.d2_wavelength_m, species.d2_linewidth_hz),
             (D1_STRENGTH, *D1_LINES[species.element]))
    total = 0.0
    for strength, wavelength, width in lines:
        detuning = abs(omega - 2 * math.pi * SPEED_OF_LIGHT / wavelength)
        rate = _near_rate if detuning < NEAR_WIDTHS * 2 * math.pi * width else _line_rate
        total += strength * rate(omega, wavelength, width, intensity_w_m2)
    return total


def saturation_intensity_w_m2(species: SpeciesData) -> float:
    """Two-level saturation intensity of the D2 line, I_sat = πhcΓ/(3λ³) (Steck's D-line data)."""
    gamma = 2 * math.pi * species.d2_linewidth_hz
    return math.pi * PLANCK * SPEED_OF_LIGHT * gamma / (3 * species.d2_wavelength_m**3)
