"""Noise sources against closed forms (each source named beside its check)."""
from __future__ import annotations

import math

import numpy as np
import pytest

import seqlang
from seqlang.sim import noise

RIG = """
rig noisebench {
  tick 1 ns
  species a = Rb87 { rydberg 70S1/2  temperature %(temp)s }
  drive mw_a microwave a { rabi 2.5 MHz  port awg0.1  amplitude_bits 32  intensity_noise %(sigma)s }
  drive ryd_a rydberg a { rabi 5 MHz  port awg1.1  amplitude_bits 32  linewidth %(linewidth)s
                          lower_wavelength 780 nm  upper_wavelength 480 nm  geometry counter }
}
"""


def _run(tmp_path, body, sources, shots=1, temp="0 uK", sigma="0", linewidth="0 Hz", seed=7):
    (tmp_path / "n.rig").write_text(RIG % {"temp": temp, "sigma": sigma, "linewidth": linewidth})
    path = tmp_path / "n.seq"
    path.write_text(f'use "n.rig"\nsite q = a at (0, 0) um\nsequence n {{\n{body}\n}}\nexpect q as |1>\n')
    return seqlang.simulate(str(path), interactions_hz={}, noise=sources, shots=shots, seed=seed)


RYDBERG_RAMSEY = "pulse mw_a area pi\npulse ryd_a area pi/2\nwait {wait}\npulse ryd_a area pi/2"


def _rydberg_population(result) -> float:
    return result.reduced_density(("q",))[2, 2].real


@pytest.mark.parametrize("wait_us", [2, 5, 10])
def test_white_laser_noise_gives_exponential_ramsey_contrast(tmp_path, wait_us):
    """Lorentzian linewidth Δν: coherence decays as exp(−γt), γ = πΔν (docs/references.md, derived)."""
    result = _run(tmp_path, RYDBERG_RAMSEY.format(wait=f"{wait_us} us"), ("dephasing",), linewidth="20 kHz")
    gamma = math.pi * 20e3
    # The two 50 ns pulses add ~50 ns of dephasing time on average (derived, small).
    expected = (1 + math.exp(-gamma * (wait_us * 1e-6 + 50e-9))) / 2
    assert _rydberg_population(result) == pytest.approx(expected, abs=3e-3)


# Doppler dephasing against T2* at several waits, within the Monte Carlo error:
# tests/test_physics_tight.py.


def test_quasi_static_intensity_noise_pi_pulse_infidelity(tmp_path):
    """Relative Rabi error ε ~ N(0, σ²): P(fail) = sin²(πε/2) ≈ (πσ/2)² (derived)."""
    result = _run(tmp_path, "pulse mw_a area pi", ("intensity",), shots=3000, sigma="4 %")
    infidelity = 1 - result.expectations[0]["fidelity"]
    assert infidelity == pytest.approx((math.pi * 0.04 / 2) ** 2, rel=0.12)
    assert result.expectations[0]["fidelity_error"] > 0


def test_seed_makes_noisy_runs_reproducible(tmp_path):
    a = _run(tmp_path, "pulse mw_a area pi", ("intensity",), shots=50, sigma="5 %", seed=11)
    b = _run(tmp_path, "pulse mw_a area pi", ("intensity",), shots=50, sigma="5 %", seed=11)
    c = _run(tmp_path, "pulse mw_a area pi", ("intensity",), shots=50, sigma="5 %", seed=12)
    assert a.expectations == b.expectations
    assert a.expectations[0]["fidelity"] != c.expectations[0]["fidelity"]
    assert a.noise == {"sources": ["intensity"], "shots": 50, "seed": 11, "shared_noise": True}


def test_binomial_error_bar_matches_sampled_spread():
    """Standard error of a probability estimated from N shots: √(p(1−p)/N) (binomial, textbook)."""
    rng = np.random.default_rng(5)
    p, shots = 0.3, 400
    estimates = rng.binomial(shots, p, size=4000) / shots
    assert noise.binomial_error(p, shots) == pytest.approx(np.std(estimates), rel=0.05)


def test_unknown_noise_source_is_rejected():
    with pytest.raises(ValueError, match="unknown noise source"):
        noise.parse_sources("decay,gremlins")


# A sodium atom entangled with two caesium atoms through blockade, then imaged: the caesium
# pair's numbers given each outcome of the sodium atom are a ratio of per-shot sums.
CONDITIONED = """\
use "millpond.rig"
site d = na at (0, 0) um
site e = cs at (4.0, 0) um
site h = cs at (-4.0, 0) um
sequence s {
  together {
    pulse mw_na area pi/2 phase -90 deg
    pulse mw_cs area pi/2 phase -90 deg
  }
  pulse ryd_cs on e area pi
  pulse ryd_na area 2pi
  pulse ryd_cs on e area pi
  pulse ryd_cs on h area pi
  pulse ryd_na area 2pi
  pulse ryd_cs on h area pi
  pulse mw_na area pi/2 phase 90 deg
  image na -> m
}
expect e, h as psi_plus
"""


def test_conditioned_error_bars_match_the_spread_over_seeds(tmp_path):
    """The ratio estimator's delta-method error (textbook; e.g. Cochran, Sampling Techniques,
    1977, ch. 6) against the spread of the conditioned fidelity over independent seeds."""
    import shutil
    from pathlib import Path
    shutil.copy(Path(__file__).resolve().parent.parent / "programs" / "millpond.rig", tmp_path)
    (tmp_path / "c.seq").write_text(CONDITIONED, encoding="utf-8")
    program = seqlang.load(str(tmp_path / "c.seq"))
    given = [seqlang.simulate(program, noise="intensity,doppler", shots=300, seed=seed)
             .expectations[0]["conditioned"][1] for seed in range(1, 41)]
    assert {g["outcome"] for g in given} == {1} and all(g["site"] == "d" for g in given)
    spread = np.std([g["fidelity"] for g in given], ddof=1)
    reported = np.mean([g["fidelity_error"] for g in given])
    # 40 seeds: the sample spread itself is uncertain by about 1/√78 ≈ 11 %
    assert spread == pytest.approx(reported, rel=0.35)
    p_spread = np.std([g["probability"] for g in given], ddof=1)
    assert p_spread == pytest.approx(np.mean([g["probability_error"] for g in given]), rel=0.35)
    exact = seqlang.simulate(program).expectations[0]["conditioned"]
    assert exact and not any("fidelity_error" in g or "probability_error" in g for g in exact), \
        "no error bar on an exact number"
