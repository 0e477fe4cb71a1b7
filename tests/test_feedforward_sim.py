"""Feed-forward simulated shot by shot, against independent closed forms.

The scenario: N helper atoms and one data atom share one quasi-static field
offset per shot (Gaussian phase φ of rms σ). The helpers are measured in the
y basis, so each reads bright with p = (1 + sin φ)/2 and the bright count is
binomial(N, p) (Born rule; the standard Ramsey projection). The data's final
pulse is rotated by the estimate φ̂ = asin(2k/N − 1); its coherence is then
E[cos(φ − φ̂)], computed here as a finite binomial sum over k averaged over φ
by Gauss–Hermite quadrature (numpy), independently of the simulator. Without
feed-forward the data keeps exp(−σ²/2), the Gaussian average of cos φ (the
characteristic function of a normal variable, textbook). Invented test rig.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import binom

import seqlang

RIG = """\
rig pondbench {
  tick 2 ns
  field_rms 1.9 mG
  species na = Na23 { field_sensitivity 100 Hz / mG }
  species cs = Cs133 { field_sensitivity 100 Hz / mG }
  drive mw_na microwave na { rabi 1 MHz  port awg0.1 }
  drive mw_cs microwave cs { rabi 1 MHz  port awg0.2 }
  image cs { port ttl.9  duration 100 us  decision_latency 10 us  false_positive 2 %  false_negative 5 % }
}
"""
RAMSEY_S = 1e-3
TAU_S = 0.25e-6  # a π/2 pulse at 1 MHz


def _program(tmp_path, helpers: int) -> str:
    sites = "\n".join(f"site h{i} = cs at ({10 * i}, 0) um" for i in range(helpers))
    group = ", ".join(f"h{i}" for i in range(helpers))
    text = f"""use "bench.rig"
{sites}
site d = na at (0, 30) um
group helpers = {group}
sequence ff {{
  together {{
    pulse mw_na area pi/2
    pulse mw_cs area pi/2
  }}
  wait {RAMSEY_S * 1e3} ms
  together {{
    pulse mw_cs area pi/2 phase -90 deg
    wait 0.25 us
  }}
  together {{
    image cs -> mid
    serial_train
  }}
  pulse mw_na area pi/2 phase 180 deg - asin(clip(2 * fraction(mid[helpers]) - 1, -1, 1))
}}
expect d as |0>
"""
    # a CPMG pair of π pulses about y on the data while the helpers are imaged (refocuses the offset)
    train = "do pair()"
    text = text.replace("serial_train", train)
    text += """block pair() {
  wait 30 us
  pulse mw_na area pi phase 90 deg
  wait 60 us
  pulse mw_na area pi phase 90 deg
  wait 30 us
}
"""
    (tmp_path / "bench.rig").write_text(RIG)
    path = tmp_path / "ff.seq"
    path.write_text(text)
    return str(path)


def _sigma() -> float:
    """rms phase of the shared offset over the Ramsey time (first-order effective time T + 4τ/π)."""
    return 2 * math.pi * 100 * 1e3 * 1.9e-3 * (RAMSEY_S + 4 * TAU_S / math.pi)


def _binomial_coherence(n: int, sigma: float, fp: float = 0.0, fn: float = 0.0) -> tuple[float, float]:
    """E[cos(φ − φ̂)] and its shot-to-shot variance: binomial sum over counts, Gauss–Hermite over φ."""
    x, w = np.polynomial.hermite_e.hermegauss(80)
    w = w / w.sum()
    k = np.arange(n + 1)
    estimate = np.arcsin(np.clip(2 * k / n - 1, -1, 1))
    mean = second = 0.0
    for phi, weight in zip(sigma * x, w):
        p = (1 + math.sin(phi)) / 2
        p = p * (1 - fn) + (1 - p) * fp  # the readout confusion matrix
        prob = binom.pmf(k, n, p)
        c = np.cos(phi - estimate)
        mean += weight * (prob * c).sum()
        second += weight * (prob * c**2).sum()
    return mean, second - mean**2


def _coherence(expectation: dict, which: str) -> float:
    return 2 * expectation["feed_forward"][which]["fidelity"] - 1


SHOTS = 2000


@pytest.fixture(scope="module")
def four_helpers(tmp_path_factory):
    path = _program(tmp_path_factory.mktemp("ff4"), 4)
    return seqlang.simulate(path, noise="field_noise", shots=SHOTS, seed=3)


def test_bright_count_is_binomial_with_p_of_the_shared_phase(four_helpers):
    """P(k) = E_φ[binom(k; N, (1 + sin φ)/2)] for the helpers' bright count."""
    keys = four_helpers.expectations[0]["feed_forward"]["keys"][0]["keys"]
    x, w = np.polynomial.hermite_e.hermegauss(80)
    w = w / w.sum()
    expected = sum(weight * binom.pmf(np.arange(5), 4, (1 + np.sin(_sigma() * xi)) / 2) for xi, weight in zip(x, w))
    for row, p in zip(keys, expected):
        assert abs(row["probability"] - p) < 4 * math.sqrt(p * (1 - p) / SHOTS), (row, p)


def test_recovered_coherence_matches_the_binomial_sum(four_helpers):
    mean, variance = _binomial_coherence(4, _sigma())
    simulated = _coherence(four_helpers.expectations[0], "with")
    assert abs(simulated - mean) < 4 * math.sqrt(variance / SHOTS), (simulated, mean)


def test_without_correction_the_coherence_is_the_gaussian_average(four_helpers):
    closed = math.exp(-_sigma() ** 2 / 2)
    without = _coherence(four_helpers.expectations[0], "without")
    spread = math.sqrt((1 + math.exp(-2 * _sigma() ** 2)) / 2 - closed**2)  # Var cos φ for Gaussian φ
    assert four_helpers.expectations[0]["feed_forward"]["keys"][0]["fixed_key_without"] == 2
    assert abs(without - closed) < 4 * spread / math.sqrt(SHOTS), (without, closed)
    assert _coherence(four_helpers.expectations[0], "with") > without + 0.05


def test_unshared_noise_gives_no_benefit(tmp_path):
    path = _program(tmp_path, 4)
    result = seqlang.simulate(path, noise="field_noise", shots=SHOTS, seed=3, shared_noise=False)
    e = result.expectations[0]
    spread = 1 / math.sqrt(SHOTS)
    assert _coherence(e, "with") < _coherence(e, "without") + 3 * spread
    assert result.noise["shared_noise"] is False


def test_readout_errors_enter_through_the_confusion_matrix(tmp_path):
    path = _program(tmp_path, 2)
    result = seqlang.simulate(path, noise="field_noise,imaging", shots=SHOTS, seed=5)
    mean, variance = _binomial_coherence(2, _sigma(), fp=0.02, fn=0.05)
    simulated = _coherence(result.expectations[0], "with")
    assert abs(simulated - mean) < 4 * math.sqrt(variance / SHOTS), (simulated, mean)


def test_identical_runs_are_identical(tmp_path):
    path = _program(tmp_path, 2)
    a = seqlang.simulate(path, noise="field_noise", shots=100, seed=9)
    b = seqlang.simulate(path, noise="field_noise", shots=100, seed=9)
    assert a.expectations == b.expectations


def test_without_is_the_same_shots_as_the_uncorrected_program(tmp_path):
    """Common random numbers: `without` (fixed key N/2, i.e. no correction) replays the shots of the
    same sequence written with a fixed final phase and simulated the usual way."""
    path = _program(tmp_path, 2)
    plain = tmp_path / "plain.seq"
    text = open(path).read().replace("180 deg - asin(clip(2 * fraction(mid[helpers]) - 1, -1, 1))", "180 deg")
    plain.write_text(text)
    ff = seqlang.simulate(path, noise="field_noise,t2_star", shots=300, seed=4)
    reference = seqlang.simulate(str(plain), noise="field_noise,t2_star", shots=300, seed=4)
    assert ff.expectations[0]["feed_forward"]["without"]["fidelity"] == pytest.approx(
        reference.expectations[0]["fidelity"], abs=1e-9)
