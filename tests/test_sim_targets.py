"""Many-atom targets: GHZ with its parity-oscillation coherence, W, products, N-body correlators."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import seqlang
from seqlang.sim import observables

ROOT = Path(__file__).resolve().parents[1]
GHZ5 = str(ROOT / "programs" / "ghz5.seq")
SITES = ("c", "t1", "t2", "t3", "t4")


@pytest.fixture(scope="module")
def noisy_ghz():
    return seqlang.simulate(GHZ5, noise="intensity,doppler", shots=60, seed=2)


def _parity_curve(block: np.ndarray, count: int, phis: np.ndarray) -> np.ndarray:
    """⟨⊗(cos φ X + sin φ Y)⟩, built independently of the simulator's formulas."""
    x, y = np.array([[0, 1], [1, 0]]), np.array([[0, -1j], [1j, 0]])
    out = []
    for phi in phis:
        op = np.array([[1.0 + 0j]])
        for _ in range(count):
            op = np.kron(op, math.cos(phi) * x + math.sin(phi) * y)
        out.append(np.trace(block @ op).real)
    return np.array(out)


def test_ghz_fidelity_from_populations_and_parity_oscillation(noisy_ghz):
    """F = (P_0…0 + P_1…1)/2 + C/2 with C the amplitude of the N-fold parity oscillation
    (Sackett et al., Nature 404, 256 (2000)); C read off a simulated parity scan, and F equal to
    the best GHZ fidelity over the relative phase."""
    e = noisy_ghz.expectations[0]
    block = observables.qubit_block(noisy_ghz.reduced_density(SITES), 5)
    phis = np.linspace(0, 2 * math.pi, 80, endpoint=False)
    parity = _parity_curve(block, 5, phis)
    amplitude = 2 * abs(np.mean(parity * np.exp(-5j * phis)))
    assert e["ghz"]["coherence"] == pytest.approx(amplitude, abs=1e-9)
    best = max(observables.target_vector("ghz", False, 5, t).conj() @ block @ observables.target_vector(
        "ghz", False, 5, t) for t in np.linspace(0, 2 * math.pi, 3601)).real
    assert e["ghz"]["parity_fidelity"] == pytest.approx(best, abs=1e-6)
    assert e["ghz"]["parity_fidelity"] >= e["fidelity"] - 1e-12
    assert 0 < e["ghz_error"]["coherence"] < 0.1 and e["fidelity_error"] > 0


def test_noiseless_ghz_demo_makes_the_state_it_names():
    """The demo's sequence (π–2π–π gates, Jaksch et al., PRL 85, 2208 (2000)) makes
    (|00000⟩ − |11111⟩)/√2 up to the blockade leakage ~(Ω/V)²."""
    e = seqlang.simulate(GHZ5).expectations[0]
    assert e["phase_rad"] == pytest.approx(math.pi)
    assert e["fidelity"] > 0.9999 and e["ghz"]["coherence"] > 0.9999
    assert e["correlators"]["XXXXX"] == pytest.approx(-1.0, abs=1e-3)  # cos(phase)
    assert e["correlators"]["ZZIII"] == pytest.approx(1.0, abs=1e-3)
    assert not [k for k in e if k.endswith("_error")]


def test_target_vectors_are_the_named_states():
    s = 1 / math.sqrt(2)
    assert np.allclose(observables.target_vector("ghz", False, 3, math.pi / 2), [s, 0, 0, 0, 0, 0, 0, 1j * s])
    w = observables.target_vector("w", False, 3)
    assert np.allclose(w, np.array([0, 1, 1, 0, 1, 0, 0, 0]) / math.sqrt(3))
    assert np.allclose(observables.target_vector("plus*one", False), [0, s, 0, s])
    assert np.allclose(observables.target_vector("minus_i*zero", False), [s, 0, -1j * s, 0])


def test_product_target_after_a_half_pi_pulse(tmp_path):
    """exp(−iπ/4 σx)|0⟩ = (|0⟩ − i|1⟩)/√2 for each atom (Rabi formula, textbook)."""
    (tmp_path / "p.rig").write_text("rig p {\n  tick 1 ns\n  species a = Rb87 { rydberg 70S1/2 }\n"
                                    "  drive mw_a microwave a { rabi 2 MHz  port awg0.1  amplitude_bits 32 }\n}\n")
    (tmp_path / "p.seq").write_text('use "p.rig"\nsite u = a at (0, 0) um\nsite v = a at (30, 0) um\n'
                                    "sequence p {\n  pulse mw_a area pi/2\n}\n"
                                    "expect u, v as minus_i * minus_i correlate (YY, ZI)\n"
                                    "expect u, v as plus * plus\n")
    result = seqlang.simulate(str(tmp_path / "p.seq"), interactions_hz={})
    product, other = result.expectations
    assert product["fidelity"] == pytest.approx(1.0, abs=1e-9)
    assert product["correlators"]["YY"] == pytest.approx(1.0, abs=1e-9)  # ⟨σy⟩ = −1 on each atom
    assert product["correlators"]["ZI"] == pytest.approx(0.0, abs=1e-9)
    assert other["fidelity"] == pytest.approx(0.25, abs=1e-9)  # |⟨+|−i⟩|² = 1/2 per atom


def test_long_population_tables_are_summarised_on_the_terminal(noisy_ghz):
    from seqlang.sim.commands import TOP_OUTCOMES, as_document, summary
    document = as_document(noisy_ghz)
    assert len(document["expectations"][0]["populations"]) == 32  # complete in the JSON
    line = next(x for x in summary(document).splitlines() if "top outcomes" in x)
    assert line.count(": ") == TOP_OUTCOMES and "+24 more" in line
