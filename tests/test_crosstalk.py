"""Imaging crosstalk: far-detuned scattering of one species' imaging light by the other.

The rate is checked against the far-detuned formula of Grimm, Weidemüller &
Ovchinnikov, Adv. At. Mol. Opt. Phys. 42, 95 (2000) (eq. 19 with the
counter-rotating terms of eq. 12), written out here with D-line data from
D. A. Steck, "Sodium D Line Data" and "Cesium D Line Data" (vacuum wavelengths
and natural linewidths; values from memory to the digits given), and near a line
against the saturated two-level rate (Γ/2)s/(1 + s + 4Δ²/Γ²) (Steck, same notes).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

import seqlang
from seqlang.atoms.scattering import saturation_intensity_w_m2, scattering_rate_hz
from seqlang.atoms.species import lookup

C, HBAR, H = 299_792_458.0, 1.054_571_817e-34, 6.626_070_15e-34
STECK = {  # (D2 λ, Γ/2π), (D1 λ, Γ/2π)
    "Na23": ((589.158e-9, 9.795e6), (589.756e-9, 9.765e6)),
    "Cs133": ((852.347e-9, 5.234e6), (894.593e-9, 4.575e6)),
}


def _grimm(species: str, wavelength: float, intensity: float) -> float:
    omega = 2 * math.pi * C / wavelength
    total = 0.0
    for strength, (lam, width) in zip((2 / 3, 1 / 3), STECK[species]):
        w0, g = 2 * math.pi * C / lam, 2 * math.pi * width
        total += strength * 3 * math.pi * C**2 / (2 * HBAR * w0**3) * (omega / w0) ** 3 \
            * (g / (w0 - omega) + g / (w0 + omega)) ** 2 * intensity
    return total


@pytest.mark.parametrize("species, wavelength", [("Na23", 852.35e-9), ("Cs133", 589.16e-9),
                                                 ("Cs133", 1064e-9), ("Na23", 532e-9)])
def test_far_detuned_rate_matches_grimm_with_steck_data(species, wavelength):
    intensity = 120.0  # 12 mW/cm²
    assert scattering_rate_hz(lookup(species), wavelength, intensity) == pytest.approx(
        _grimm(species, wavelength, intensity), rel=2e-3)


def test_near_a_line_the_saturated_two_level_rate_is_used():
    cs = lookup("Cs133")
    lam, width = cs.d2_wavelength_m, cs.d2_linewidth_hz  # Steck's values, as the species table holds them
    assert (lam, width) == pytest.approx(STECK["Cs133"][0], rel=1e-6)
    gamma = 2 * math.pi * width
    delta = 2 * math.pi * 20e6  # 20 MHz below the D2 line
    wavelength = 2 * math.pi * C / (2 * math.pi * C / lam - delta)
    i_sat = math.pi * H * C * gamma / (3 * lam**3)
    assert saturation_intensity_w_m2(cs) == pytest.approx(11.02, rel=3e-3)  # Steck: 1.1023 mW/cm² (cycling)
    s = 2.0
    expected = 2 / 3 * gamma / 2 * s / (1 + s + 4 * delta**2 / gamma**2)
    assert scattering_rate_hz(cs, wavelength, s * i_sat) == pytest.approx(expected, rel=5e-3)


RIG = """\
rig pondbench {
  tick 2 ns
  species na = Na23 { qubit clock }
  species k = K39 { qubit clock }
  drive mw_na microwave na { rabi 1 MHz  port awg0.1 }
  image k { port ttl.9  duration 20 ms  light_wavelength 589.17 nm  light_intensity 30 mW / cm^2 }
}
"""


def test_crosstalk_dephases_the_other_species_by_the_scattering_probability(tmp_path):
    """Potassium imaged with light 10 GHz from the sodium D2 line: each sodium atom that scatters
    loses its coherence (random phase), so the Ramsey contrast is 1 − P, P = 1 − exp(−Γ_sc T)."""
    (tmp_path / "bench.rig").write_text(RIG)
    path = tmp_path / "x.seq"
    path.write_text('use "bench.rig"\nsite a = na at (0, 0) um\nsite h = k at (20, 0) um\n'
                    "sequence s {\n  pulse mw_na area pi/2\n  image k -> r\n  pulse mw_na area pi/2 phase 180 deg\n}\n"
                    "expect a as |0>\n")
    rate = scattering_rate_hz(lookup("Na23"), 589.17e-9, 300.0)
    p = 1 - math.exp(-rate * 20e-3)
    assert 0.2 < p < 0.9  # the test needs a visible effect
    result = seqlang.simulate(str(path), noise="crosstalk", shots=2000, seed=1)
    contrast = 2 * result.expectations[0]["fidelity"] - 1
    spread = math.sqrt(p * (1 - p) + p / 2) / math.sqrt(2000)
    assert contrast == pytest.approx(1 - p, abs=4 * spread)
    off = seqlang.simulate(str(path), noise="off")
    assert off.expectations[0]["fidelity"] == pytest.approx(1.0, abs=1e-6)
