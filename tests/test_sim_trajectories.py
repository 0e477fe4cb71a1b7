"""Pure dephasing as phase-kick trajectories, against the Lindblad engine and closed forms.

The ket engine unravels L = √(2γ)|r⟩⟨r| as Gaussian phase kicks drawn per shot; the
shot average must equal the Lindblad (density-matrix) result within Monte Carlo error,
and a Ramsey contrast must decay as exp(−γt), the textbook result for pure dephasing at
rate γ (C. W. Gardiner & P. Zoller, Quantum Noise, Springer 2004, ch. 3 — from memory;
any quantum-optics text), with γ = πΔν for a Lorentzian linewidth Δν (REFERENCES.md).
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import seqlang

ROOT = Path(__file__).resolve().parents[1]
RIG = """
rig kickbench {
  tick 1 ns
  species a = Rb87 { rydberg 70S1/2 }
  drive mw_a microwave a { rabi 50 MHz  port awg0.1  amplitude_bits 32 }
  drive ryd_a rydberg a { rabi 10 MHz  reach each  port awg1.1  amplitude_bits 32  linewidth %(linewidth)s }
}
"""
RAMSEY = "pulse mw_a area pi\npulse ryd_a area pi/2\nwait {wait}\npulse ryd_a area pi/2"


def _program(tmp_path, body, sites="site q = a at (0, 0) um", expect="expect q as |1>",
             linewidth="20 kHz") -> str:
    (tmp_path / "k.rig").write_text(RIG % {"linewidth": linewidth})
    path = tmp_path / "k.seq"
    path.write_text(f'use "k.rig"\n{sites}\nsequence k {{\n{body}\n}}\n{expect}\n')
    return str(path)


@pytest.mark.parametrize("wait_us", [3, 10])
def test_trajectory_ramsey_contrast_decays_as_exp_minus_gamma_t(tmp_path, wait_us):
    """P(r) after π/2 – wait – π/2 = (1 + e^{−γ(T + τ)})/2, τ ≈ 50 ns for the two pulses (derived)."""
    path = _program(tmp_path, RAMSEY.format(wait=f"{wait_us} us"))
    shots = 3000
    result = seqlang.simulate(path, interactions_hz={}, noise="dephasing", engine="trajectories", shots=shots)
    assert result.engine == "trajectories"
    p_r = result.reduced_density(("q",))[2, 2].real
    expected = (1 + math.exp(-math.pi * 20e3 * (wait_us * 1e-6 + 50e-9))) / 2
    # Each shot's P(r) = (1 + cos φ)/2, so the spread is at most 1/2 per shot.
    assert p_r == pytest.approx(expected, abs=4 * 0.5 / math.sqrt(shots))


def test_trajectories_agree_with_the_lindblad_engine_on_the_bell_demo():
    """The demo's π–2π–π gate with laser dephasing: trajectories = Lindblad engine (exact reference)
    within four Monte Carlo standard errors, in the fidelity and every population."""
    path = str(ROOT / "programs" / "bell_pair.seq")
    exact = seqlang.simulate(path, noise="dephasing", engine="lindblad")
    kicked = seqlang.simulate(path, noise="dephasing", engine="trajectories", shots=400, seed=3)
    assert "exact" in exact.noise and "fidelity_error" not in exact.expectations[0]
    e, k = exact.expectations[0], kicked.expectations[0]
    assert k["fidelity_error"] > 0
    assert k["fidelity"] == pytest.approx(e["fidelity"], abs=4 * k["fidelity_error"] + 1e-4)
    for label, p in e["populations"].items():
        assert k["populations"][label] == pytest.approx(p, abs=4 * k["populations_error"][label] + 1e-4)


def test_trajectories_agree_with_lindblad_on_a_blockaded_three_atom_cluster(tmp_path):
    """Three atoms within one blockade radius under a collective pulse, linewidth 1 MHz: the
    Rydberg populations and W fidelities of both engines agree within Monte Carlo error."""
    sites = "\n".join(f"site s{k} = a at ({3 * k}, 0) um" for k in range(3))
    body = "pulse mw_a area pi\npulse ryd_a on s0, s1, s2 duration 300 ns"
    path = _program(tmp_path, body, sites, "expect s0, s1, s2 as w", linewidth="1 MHz")
    interactions = {("s0", "s1"): 3e8, ("s1", "s2"): 3e8, ("s0", "s2"): 5e6}
    exact = seqlang.simulate(path, interactions_hz=interactions, noise="dephasing", engine="lindblad")
    kicked = seqlang.simulate(path, interactions_hz=interactions, noise="dephasing", engine="trajectories",
                              shots=600, seed=11)
    e, k = exact.expectations[0], kicked.expectations[0]
    assert abs(k["residual_rydberg"] - e["residual_rydberg"]) <= 4 * k["residual_rydberg_error"] + 1e-4
    assert abs(k["fidelity"] - e["fidelity"]) <= 4 * k["fidelity_error"] + 1e-4
    noiseless = seqlang.simulate(path, interactions_hz=interactions, noise="off").expectations[0]
    assert abs(noiseless["residual_rydberg"] - e["residual_rydberg"]) > 6 * k["residual_rydberg_error"]


def test_auto_unravels_dephasing_when_the_density_matrix_is_large_and_says_so():
    """Five atoms with `--noise dephasing`: auto picks trajectories (kets) and leaves a note."""
    result = seqlang.simulate(str(ROOT / "programs" / "ghz5.seq"), noise="dephasing", shots=20)
    assert result.engine == "trajectories"
    assert any("density matrix" in note for note in result.noise["notes"])
    small = seqlang.simulate(str(ROOT / "programs" / "bell_pair.seq"), noise="dephasing")
    assert small.engine == "lindblad" and "notes" not in small.noise


def test_trajectories_are_reproducible_and_refuse_decay_back_into_the_qubit(tmp_path):
    path = _program(tmp_path, RAMSEY.format(wait="2 us"))
    a = seqlang.simulate(path, interactions_hz={}, noise="dephasing", engine="trajectories", shots=50, seed=4)
    b = seqlang.simulate(path, interactions_hz={}, noise="dephasing", engine="trajectories", shots=50, seed=4)
    c = seqlang.simulate(path, interactions_hz={}, noise="dephasing", engine="trajectories", shots=50, seed=5)
    assert a.expectations == b.expectations and a.expectations != c.expectations
    rig = (tmp_path / "k.rig").read_text().replace("species a = Rb87 { rydberg 70S1/2 }",
                                                   "species a = Rb87 { rydberg 70S1/2  decay_to_qubit 0.5 }")
    (tmp_path / "k.rig").write_text(rig)
    with pytest.raises(ValueError, match="lindblad"):
        seqlang.simulate(path, interactions_hz={}, noise="decay", engine="trajectories", shots=5)


def test_kick_average_is_the_dephasing_channel():
    """E[e^{−iφ}] = e^{−σ²/2} for φ ~ N(0, σ²) with σ² = 2γ·dt: the kick of one step damps
    the coherence by e^{−γ·dt}, exactly the Lindblad dephasing of that step (derived)."""
    from seqlang.sim.basis import full_basis
    from seqlang.sim.engine import _Kicks
    from seqlang.sim.noise import Jump
    basis = full_basis(1, 4)
    gamma, dt, rows = 3e5, 2e-6, 20000
    kicks = _Kicks(basis, [Jump(0, 2, 2, 2 * gamma)], rows, np.random.default_rng(0))
    states = np.ones((1, rows, 4), dtype=complex)
    kicked = kicks.apply(states, dt)
    assert np.allclose(kicked[0, :, [0, 1, 3]], 1.0)
    assert kicked[0, :, 2].mean().real == pytest.approx(math.exp(-gamma * dt), abs=4 / math.sqrt(rows))
