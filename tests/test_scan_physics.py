"""Scans against closed forms: the Rabi formula over a detuning scan, the √2 blockade
enhancement over a duration scan. Each point is the played (tick-quantized) pulse."""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import curve_fit

import seqlang
from tests.conftest import ROOT, write_program


def test_detuning_scan_follows_the_rabi_formula_at_every_point(tmp_path):
    """P(|1>) = Ω²/(Ω²+Δ²)·sin²(√(Ω²+Δ²)·t/2) for a square pulse from |0> (the Rabi formula;
    C. J. Foot, Atomic Physics, OUP 2005, ch. 7), with Ω, Δ, t of each point's played pulse."""
    path = str(ROOT / "programs/scan_microwave_resonance.seq")
    ds = seqlang.scan(path, str(tmp_path / "out"), simulate=True, workers=1, progress=False)
    measured = ds["level_1_c0"].values
    assert np.all(ds["point_done"].values == 1) and measured.shape == (49,)
    expected = []
    for index in range(49):
        pulse = seqlang.load(path, point=index).played.events[0]
        omega, delta = 2 * math.pi * pulse.rabi_hz, 2 * math.pi * pulse.detuning_hz
        general = math.hypot(omega, delta)
        expected.append(omega**2 / general**2 * math.sin(general * pulse.duration_s / 2) ** 2)
    assert measured == pytest.approx(expected, abs=1e-6)
    assert ds["delta"].values[24] == 0 and measured[24] == pytest.approx(1, abs=1e-6)


BLOCKADED = """use "millpond.rig"
site p = cs at (0, 0) um
{second}
scan t = 60 ns .. 1.2 us points 25
sequence rabi {{
  pulse mw_cs area pi
  pulse ryd_cs on {targets} duration t
}}
"""


def _rydberg_curve(tmp_path, name, second, targets):
    (tmp_path / "millpond.rig").write_text((ROOT / "programs/millpond.rig").read_text())
    path = write_program(tmp_path, BLOCKADED.format(second=second, targets=targets),
                         (ROOT / "programs/millpond.rig").read_text(), name=name)
    (tmp_path / "bench.rig").unlink()
    ds = seqlang.scan(path, str(tmp_path / name.replace(".seq", "")), simulate=True, workers=1, progress=False)
    areas = np.array([seqlang.load(path, point=i).played.events[1].area_rad for i in range(25)])
    rydberg = sum(ds[f"level_r_{s}"].values for s in targets.split(", "))
    return areas, rydberg


def test_blockaded_pair_oscillates_root_two_faster(tmp_path):
    """N atoms inside one blockade radius share one excitation and oscillate at √N·Ω
    (Gaëtan et al., Nat. Phys. 5, 115 (2009); Urban et al., Nat. Phys. 5, 110 (2009))."""
    single_area, single = _rydberg_curve(tmp_path, "one.seq", "", "p")
    pair_area, pair = _rydberg_curve(tmp_path, "two.seq", "site q = cs at (3.5, 0) um", "p, q")
    assert single == pytest.approx(np.sin(single_area / 2) ** 2, abs=1e-3)
    assert pair == pytest.approx(np.sin(math.sqrt(2) * pair_area / 2) ** 2, abs=5e-3)
    fit = lambda area, k: np.sin(k * area / 2) ** 2
    (k_single,), _ = curve_fit(fit, single_area, single, p0=[1.1])
    (k_pair,), _ = curve_fit(fit, pair_area, pair, p0=[1.3])
    assert k_pair / k_single == pytest.approx(math.sqrt(2), rel=2e-3)
