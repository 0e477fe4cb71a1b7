"""The Doppler source with the traps switched on and off (a port declared `role traps`).

Closed forms (derived for a thermal classical harmonic oscillator along k_eff, radial trap
frequency ω: x(t) = x₀ cos ωt + (v₀/ω) sin ωt, x₀ ~ N(0, k_BT/mω²), v₀ ~ N(0, k_BT/m)):
the Ramsey phase between two short pulses at t₁, t₂ is k·(x(t₂) − x(t₁)), Gaussian with variance

    traps on:  2k²σ_x²(1 − cos ω(t₂ − t₁))     (bounded by 4k²σ_x², for any wait)
    traps off: k²σ_v²(t₂ − t₁)²                (free flight: contrast exp(−(t/T2*)²),
                                                T2* = √2/(k σ_v), de Léséleuc et al., PRA 97, 053803 (2018))

and, for switches in between, k²[(M₀₀ − 1)²σ_x² + M₀₁²σ_v²] with M the product of the harmonic and
ballistic maps of (x, v) over the pieces (position and velocity continuous at each switch).
Contrast = exp(−variance/2). Checked end to end within four Monte Carlo standard errors of a seeded
run, and shot by shot (the played coupling phases against the closed-form track of each shot's
drawn x₀, v₀) to 1e-9.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

import seqlang
from seqlang.sim import noise
from seqlang.sim.model import build_model

K_B = 1.380649e-23  # J/K, exact (SI 2019)
RB87_MASS_KG = 86.909180527 * 1.66053906660e-27  # D. A. Steck, "Rubidium 87 D Line Data" (published); CODATA u
TEMPERATURE_K = 20e-6
TRAP_HZ = 95e3  # invented demo-scale radial trap frequency
K_EFF = abs(2 * math.pi / 780e-9 - 2 * math.pi / 480e-9)  # counter-propagating 780 nm + 480 nm legs
SIGMA_V = math.sqrt(K_B * TEMPERATURE_K / RB87_MASS_KG)
OMEGA = 2 * math.pi * TRAP_HZ
SIGMA_X = SIGMA_V / OMEGA
PERIOD_NS = 1e9 / TRAP_HZ
SHOTS = 8000
PULSE_NS = 2  # a π/2 pulse at 125 MHz

RIG = f"""
rig trapdoppler {{
  tick 1 ns
  species a = Rb87 {{ rydberg 70S1/2  temperature 20 uK  trap_radial 95 kHz }}
  drive mw_a microwave a {{ rabi 125 MHz  port awg0.1  amplitude_bits 32 }}
  drive ryd_a rydberg a {{ rabi 125 MHz  port awg1.1  amplitude_bits 32
                          lower_wavelength 780 nm  upper_wavelength 480 nm  geometry counter }}
  port tweezers = ttl.3 {{ kind digital  role traps }}
}}
"""


def _write(tmp_path, body: str):
    (tmp_path / "d.rig").write_text(RIG)
    path = tmp_path / "d.seq"
    path.write_text(f'use "d.rig"\nsite q = a at (0, 0) um\nsequence d {{\n{body}\n}}\nexpect q as |1>\n')
    return str(path)


def _ramsey(before: str, wait: str) -> str:
    return f"pulse mw_a area pi\n{before}\npulse ryd_a area pi/2\n{wait}\npulse ryd_a area pi/2"


def _p1(path: str, shots: int = SHOTS):
    e = seqlang.simulate(path, interactions_hz={}, noise=("doppler",), shots=shots, seed=5).expectations[0]
    return e["fidelity"], e["fidelity_error"]


def _harmonic(t):
    return np.array([[math.cos(OMEGA * t), math.sin(OMEGA * t) / OMEGA],
                     [-OMEGA * math.sin(OMEGA * t), math.cos(OMEGA * t)]])


def _free(t):
    return np.array([[1.0, t], [0.0, 1.0]])


def _contrast(pieces) -> float:
    """exp(−Var/2) of k·(x(t₂) − x(t₁)) for a thermal start at t₁ and the maps of `pieces`."""
    m = np.eye(2)
    for duration, trapped in pieces:
        m = (_harmonic if trapped else _free)(duration) @ m
    variance = K_EFF**2 * ((m[0, 0] - 1) ** 2 * SIGMA_X**2 + m[0, 1] ** 2 * SIGMA_V**2)
    return math.exp(-variance / 2)


@pytest.mark.parametrize("periods", [0.25, 0.5, 1.0, 3.5])
def test_traps_on_the_ramsey_contrast_stays_bounded(tmp_path, periods):
    """Traps on all along: contrast exp(−k²σ_x²(1 − cos ωτ)) ≥ exp(−2k²σ_x²) ≈ 0.76 here, at waits where
    free flight would have lost it (3.5 periods ≈ 5.8 T2*)."""
    wait_ns = round(periods * PERIOD_NS) - PULSE_NS
    p1, error = _p1(_write(tmp_path, _ramsey("", f"wait {wait_ns} ns")))
    tau = (wait_ns + PULSE_NS) * 1e-9  # between the pulse midpoints
    expected = math.exp(-(K_EFF * SIGMA_X) ** 2 * (1 - math.cos(OMEGA * tau)))
    assert expected == pytest.approx(_contrast([(tau, True)]), rel=1e-12)
    assert expected > math.exp(-2 * (K_EFF * SIGMA_X) ** 2) - 1e-12
    # Beside the Monte Carlo error: the pulses' own Doppler detuning, of order (kσ_v/Ω)² ≈ 1e-7.
    assert p1 == pytest.approx((1 - expected) / 2, abs=4 * error + (K_EFF * SIGMA_V / (2 * math.pi * 125e6)) ** 2)
    free = math.exp(-(tau * K_EFF * SIGMA_V) ** 2 / 2)
    if periods > 1:
        assert (1 - expected) / 2 < (1 - free) / 2 - 20 * error  # the bound is not the free-flight result


@pytest.mark.parametrize("wait_us", [2, 6.4, 13])
def test_traps_off_the_ramsey_contrast_is_gaussian_in_time(tmp_path, wait_us):
    """Traps switched off before the first pulse: free flight from a thermal (x, v), contrast
    exp(−(t/T2*)²), T2* = √2/(k_eff σ_v) (de Léséleuc et al., PRA 97, 053803 (2018)); t includes the
    4τ/π of two square π/2 pulses (Ramsey sensitivity function, common practice)."""
    p1, error = _p1(_write(tmp_path, _ramsey("switch tweezers off", f"wait {wait_us} us")))
    t2_star = math.sqrt(2) / (K_EFF * SIGMA_V)
    t_eff = wait_us * 1e-6 + 4 * PULSE_NS * 1e-9 / math.pi
    assert p1 == pytest.approx((1 - math.exp(-(t_eff / t2_star) ** 2)) / 2, abs=4 * error)


SWITCHED = "switch tweezers off\nwait 1500 ns\nswitch tweezers on\nwait 2 us"


def test_a_release_and_recapture_between_the_pulses_keeps_position_and_velocity(tmp_path):
    """Traps off for 1.5 µs between the pulses: the contrast of the harmonic–ballistic–harmonic map
    (continuous x and v at both switches), distinct from both the trapped and the free results."""
    body = "pulse mw_a area pi\npulse ryd_a area pi/2\nwait 2 us\n" + SWITCHED + "\npulse ryd_a area pi/2"
    p1, error = _p1(_write(tmp_path, body))
    pieces = [(2e-6 + 1e-9, True), (1.5e-6, False), (2e-6 + 1e-9, True)]  # midpoint to midpoint
    expected = _contrast(pieces)
    assert p1 == pytest.approx((1 - expected) / 2, abs=4 * error)
    tau = sum(d for d, _ in pieces)
    for other in (_contrast([(tau, True)]), _contrast([(tau, False)])):  # resolved from both limits
        assert abs(expected - other) / 2 > 8 * error


def _played(path: str, shots: int):
    sequence = seqlang.load(path)
    model = build_model(sequence.program, sequence.played, ("q",), {})
    draws = noise.draw(model, shots, np.random.default_rng(9))
    return sequence, model, draws, noise.sample(sequence.program, model, ("doppler",), draws)


def test_each_shot_plays_the_closed_form_track(tmp_path):
    """Shot by shot, the laser phase each Rydberg pulse sees at its midpoint (coupling phase φ − Δt in
    the engine's atom frame) is −k·(x(t_m) − x₀) of the closed-form track of that shot's x₀, v₀,
    and the detuning is k·v(t_m), through a release and a recapture (to 1e-9 rad)."""
    body = "pulse mw_a area pi\npulse ryd_a area pi/2\n" + SWITCHED + "\npulse ryd_a area pi/2"
    sequence, model, draws, shots = _played(_write(tmp_path, body), 2000)
    x0 = SIGMA_X * draws.offsets[:, 0, 0]
    v0 = SIGMA_V * draws.velocity[:, 0]
    t_off, t_on = next((e.start_s for e in sequence.played.events if e.kind == "switch" and e.value < 0.5)), \
        next((e.start_s for e in sequence.played.events if e.kind == "switch" and e.value > 0.5))
    checked = 0
    for seg, c in zip(model.segments, shots.couplings):
        if not seg.couplings or seg.couplings[0].drive != "ryd_a":
            continue
        t = seg.start_s + seg.duration_s / 2
        if t < t_off:
            m = _harmonic(t)
        else:
            m = _harmonic(t - t_on) @ _free(t_on - t_off) @ _harmonic(t_off)
        x, v = m[0, 0] * x0 + m[0, 1] * v0, m[1, 0] * x0 + m[1, 1] * v0
        nominal = seg.couplings[0]
        detuning = c[:, 0, 1] - nominal.delta
        laser_phase = (c[:, 0, 2] - nominal.phase) - detuning * t
        assert np.allclose(detuning, K_EFF * v, rtol=1e-9, atol=1e-6)
        assert np.allclose(laser_phase, -K_EFF * (x - x0), rtol=0, atol=1e-9)
        checked += 1
    assert checked == 2


def test_without_a_trap_port_the_source_stays_free_flight(tmp_path):
    """A rig that declares no trap switch: one velocity per shot, detuning k·v₀ and no extra phase,
    as before the traps were modelled."""
    (tmp_path / "d.rig").write_text(RIG.replace("port tweezers = ttl.3 { kind digital  role traps }", ""))
    path = tmp_path / "d.seq"
    path.write_text('use "d.rig"\nsite q = a at (0, 0) um\nsequence d {\n' + _ramsey("", "wait 3 us")
                    + '\n}\nexpect q as |1>\n')
    sequence, model, draws, shots = _played(str(path), 500)
    assert model.traps is None
    for seg, c in zip(model.segments, shots.couplings):
        if seg.couplings and seg.couplings[0].drive == "ryd_a":
            assert np.allclose(c[:, 0, 1] - seg.couplings[0].delta, K_EFF * SIGMA_V * draws.velocity[:, 0], rtol=1e-12)
            assert np.all(c[:, 0, 2] == seg.couplings[0].phase)
