"""A shaped pulse much narrower than its window is played, not stepped over.

On resonance a two-level atom is rotated by the pulse area A = 2π·f_Rabi·∫f dt
whatever the envelope (the area theorem; Allen & Eberly, Optical Resonance and
Two-Level Atoms, Wiley 1975), so P(1) = sin²(A/2) with the Gaussian's area
σ·√(2π)·erf(T/(2√2σ)) (closed form). Invented test rig.
"""
from __future__ import annotations

import math

import pytest

import seqlang

RIG = """
rig narrowbench {
  tick 1 ns
  species a = Cs133 { rydberg 62S1/2 }
  drive mw_a microwave a { rabi 2.5 MHz  port awg0.1  amplitude_bits 32  sample_rate 1 GHz }
}
"""


@pytest.mark.parametrize("sigma_ns, window_us", [(20, 0.4), (20, 50), (5, 60)])
def test_narrow_gaussian_rotates_by_its_area(tmp_path, sigma_ns, window_us):
    (tmp_path / "bench.rig").write_text(RIG)
    path = tmp_path / "narrow.seq"
    path.write_text('use "bench.rig"\nsite q = a at (0, 0) um\nsequence s {\n'
                    f"  pulse mw_a duration {window_us} us rabi 2.5 MHz shape gaussian(sigma = {sigma_ns} ns)\n"
                    "}\nexpect q as |1>\n")
    result = seqlang.simulate(str(path), interactions_hz={})
    sigma, window = sigma_ns * 1e-9, window_us * 1e-6
    area = 2 * math.pi * 2.5e6 * sigma * math.sqrt(2 * math.pi) * math.erf(window / (2 * math.sqrt(2) * sigma))
    assert result.expectations[0]["fidelity"] == pytest.approx(math.sin(area / 2) ** 2, abs=1e-6)
