"""Each noise source against an outside result: closed forms, published numbers, scipy.

Single atoms with no interactions wherever possible; Monte Carlo tolerances are set from
the run's own standard error (`fidelity_error`) or from the binomial error of the shot count.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import quad, trapezoid
from scipy.linalg import expm
from scipy.special import j0

import seqlang
from seqlang.atoms import rydberg
from seqlang.sim import budget, engine, noise

ROOT = Path(__file__).resolve().parents[1]

# An invented one-atom bench. Microwave pulses are fast (a π/2 pulse is 5 ns) so that
# the free evolution dominates every Ramsey sequence below.
RIG = """
rig sourcebench {
  tick 1 ns
  species a = Rb87 { rydberg 70S1/2  %(species)s }
  drive mw_a microwave a { rabi 50 MHz  port awg0.1  amplitude_bits 32  %(microwave)s }
  drive ryd_a rydberg a { rabi 10 MHz  port awg1.1  amplitude_bits 32
                          lower_wavelength 780 nm  upper_wavelength 480 nm  geometry counter  %(rydberg)s }
  image a { port ttl.8  duration 1 ms  %(image)s }
}
"""
MW_HALF_PI_S = 5e-9  # π/2 at 50 MHz
RYD_HALF_PI_S = 25e-9  # π/2 at 10 MHz
RB_D2_LIFETIME_S = 26.2348e-9  # Rb 5P3/2 (D. A. Steck, "Rubidium 87 D Line Data"; published)


def _write(tmp_path, body, expect="|1>", species="", microwave="", rydberg="", image="") -> str:
    (tmp_path / "bench.rig").write_text(RIG % {"species": species, "microwave": microwave,
                                               "rydberg": rydberg, "image": image})
    path = tmp_path / "s.seq"
    path.write_text(f'use "bench.rig"\nsite q = a at (0, 0) um\nsequence s {{\n{body}\n}}\nexpect q as {expect}\n')
    return str(path)


def _simulate(tmp_path, body, sources, shots=1, seed=7, expect="|1>", species="", microwave="", rydberg="",
              image="", **options):
    path = _write(tmp_path, body, expect, species, microwave, rydberg, image)
    return seqlang.simulate(path, interactions_hz={}, noise=sources, shots=shots, seed=seed, **options)


def _populations(result) -> np.ndarray:
    """P(0), P(1), P(r), P(x) of the one atom."""
    return result.reduced_density(("q",)).diagonal().real


def _mc_tolerance(expectation, floor=0.0) -> float:
    """Four Monte Carlo standard errors, plus a floor for the model's small systematic effects."""
    return 4 * expectation["fidelity_error"] + floor


# ---- 1. T2* ----------------------------------------------------------------------------
@pytest.mark.parametrize("wait_us", [5, 10, 20])
def test_t2_star_ramsey_contrast_is_gaussian(tmp_path, wait_us):
    """Quasi-static qubit detuning δ ~ N(0, 2/T2*²): ⟨cos δt⟩ = exp(−(t/T2*)²), so after
    π/2 – t – π/2 P(1) = (1 + exp(−(t/T2*)²))/2 (derived: Gaussian characteristic function)."""
    t2_star = 10e-6
    body = f"pulse mw_a area pi/2\nwait {wait_us} us\npulse mw_a area pi/2"
    result = _simulate(tmp_path, body, ("t2_star",), shots=1000, species="t2_star 10 us")
    e = result.expectations[0]
    t = wait_us * 1e-6 + MW_HALF_PI_S  # centre to centre of the pulses
    expected = (1 + math.exp(-((t / t2_star) ** 2))) / 2
    assert e["fidelity"] == pytest.approx(expected, abs=_mc_tolerance(e, 1e-3))


# ---- 2. field noise: Ramsey against spin echo ------------------------------------------
FIELD_A_HZ, FIELD_F_HZ = 50e3, 50e3


def _field_run(tmp_path, tau_s, echo: bool):
    species = f"field_noise {FIELD_A_HZ} Hz  field_noise_freq {FIELD_F_HZ} Hz"
    if echo:  # π/2, τ/2, π, τ/2, π/2 at 180°: returns to |1⟩ without noise
        half = (tau_s - 3 * MW_HALF_PI_S) / 2
        body = (f"pulse mw_a area pi/2\nwait {half * 1e9:.0f} ns\npulse mw_a area pi\n"
                f"wait {half * 1e9:.0f} ns\npulse mw_a area pi/2 phase 180 deg")
    else:
        body = f"pulse mw_a area pi/2\nwait {(tau_s - MW_HALF_PI_S) * 1e9:.0f} ns\npulse mw_a area pi/2"
    return _simulate(tmp_path, body, ("field_noise",), shots=400, species=species).expectations[0]


@pytest.mark.parametrize("f_tau", [0.1, 0.25, 0.75])
def test_field_noise_ramsey_and_echo_follow_bessel_j0(tmp_path, f_tau):
    """δ(t) = 2πA sin(2πft + φ), φ uniform. Ramsey phase Φ = ∫₀^τ δ dt = a·sin(πfτ + φ′) with
    a = (2A/f)|sin(πfτ)|; with an echo the halves subtract, a = (4A/f)sin²(πfτ/2). Averaging e^{iΦ}
    over φ gives J0(a) (derived; J0 from scipy.special). P(1) = (1 + J0(a))/2.
    The echo has the smaller a exactly when fτ < 1/2 (not for all fτ < 1)."""
    tau = f_tau / FIELD_F_HZ  # centre to centre of the outer π/2 pulses
    ramsey, echo = _field_run(tmp_path, tau, False), _field_run(tmp_path, tau, True)
    ratio = FIELD_A_HZ / FIELD_F_HZ
    a_ramsey = 2 * ratio * abs(math.sin(math.pi * f_tau))
    a_echo = 4 * ratio * math.sin(math.pi * f_tau / 2) ** 2
    assert ramsey["fidelity"] == pytest.approx((1 + j0(a_ramsey)) / 2, abs=_mc_tolerance(ramsey, 5e-4))
    assert echo["fidelity"] == pytest.approx((1 + j0(a_echo)) / 2, abs=_mc_tolerance(echo, 5e-4))
    margin = 4 * (ramsey["fidelity_error"] + echo["fidelity_error"])
    if f_tau < 0.5:  # decoupling benefit: the echo filters slow noise
        assert echo["fidelity"] > ramsey["fidelity"] + margin
    else:
        assert echo["fidelity"] < ramsey["fidelity"] - margin


def test_field_noise_without_noise_sequences_are_ideal(tmp_path):
    """The two sequences above end in |1⟩ when the source is off (so the checks test the noise)."""
    body = "pulse mw_a area pi/2\nwait 2 us\npulse mw_a area pi\nwait 2 us\npulse mw_a area pi/2 phase 180 deg"
    species = f"field_noise {FIELD_A_HZ} Hz  field_noise_freq {FIELD_F_HZ} Hz"
    assert _simulate(tmp_path, body, (), species=species).expectations[0]["fidelity"] == pytest.approx(1, abs=1e-9)


# ---- 3. servo bump of the Rydberg laser --------------------------------------------------
LINEWIDTH_HZ, BUMP_HZ, BUMP_WIDTH_HZ, BUMP_HEIGHT = 10e3, 200e3, 30e3, 50


def _bump_psd(f: float) -> float:
    """S_ν(f) = h·(Δν/π)·exp(−(f − f_b)²/2w²), one-sided (Hz²/Hz): the rig keys' definition."""
    return BUMP_HEIGHT * LINEWIDTH_HZ / math.pi * math.exp(-((f - BUMP_HZ) ** 2) / (2 * BUMP_WIDTH_HZ**2))


def _phase_variance(tau: float) -> float:
    """σ² = 4∫S_ν(f)sin²(πfτ)/f² df, by scipy.integrate.quad."""
    def integrand(f):
        return _bump_psd(f) * math.sin(math.pi * f * tau) ** 2 / f**2
    top = BUMP_HZ + 12 * BUMP_WIDTH_HZ
    return 4 * quad(integrand, 1.0, top, points=[BUMP_HZ], limit=400)[0]


@pytest.mark.parametrize("wait_us", [1.0, 2.5, 5.0])
def test_servo_bump_rydberg_ramsey_contrast(tmp_path, wait_us):
    """Gaussian laser phase noise: Rydberg Ramsey contrast exp(−σ²/2), σ² = 4∫S_ν sin²(πfτ)/f² df
    (derived; the phase-noise/frequency-noise relation S_φ = S_ν/f² as in Di Domenico, Schilt &
    Thomann, Appl. Opt. 49, 4801 (2010), from memory). At τ = 1/f_b the bump's phase nearly
    cancels and the contrast revives."""
    rydberg = (f"linewidth {LINEWIDTH_HZ} Hz  servo_bump {BUMP_HZ} Hz  servo_width {BUMP_WIDTH_HZ} Hz  "
               f"servo_height {BUMP_HEIGHT}")
    body = f"pulse mw_a area pi\npulse ryd_a area pi/2\nwait {wait_us} us\npulse ryd_a area pi/2"
    e = _simulate(tmp_path, body, ("laser_noise",), shots=1000, rydberg=rydberg).expectations[0]
    contrast = math.exp(-_phase_variance(wait_us * 1e-6 + RYD_HALF_PI_S) / 2)
    # Ideal sequence ends in |r⟩: what is left in |1⟩ is (1 − contrast)/2.
    assert e["fidelity"] == pytest.approx((1 - contrast) / 2, abs=_mc_tolerance(e, 3e-3))


# ---- 4. microwave detuning error -----------------------------------------------------------
def test_detuning_error_pi_pulse_averages_the_rabi_formula(tmp_path):
    """π pulse with detuning δ ~ N(0, (2πε)²): infidelity = ⟨1 − Ω²/(Ω²+δ²)·sin²(√(Ω²+δ²)t/2)⟩
    (Rabi formula, textbook), averaged by Gauss–Hermite quadrature (numpy)."""
    rabi_hz, error_hz = 2.5e6, 300e3
    result = _simulate(tmp_path, f"pulse mw_a area pi rabi {rabi_hz} Hz", ("detuning_error",), shots=2000,
                       microwave=f"detuning_error {error_hz} Hz")
    e = result.expectations[0]
    x, weights = np.polynomial.hermite_e.hermegauss(80)
    omega, delta = 2 * math.pi * rabi_hz, 2 * math.pi * error_hz * x
    generalized = np.sqrt(omega**2 + delta**2)
    excited = omega**2 / generalized**2 * np.sin(generalized * (math.pi / omega) / 2) ** 2
    expected = float(np.sum(weights * (1 - excited)) / np.sum(weights))
    assert 1 - e["fidelity"] == pytest.approx(expected, abs=_mc_tolerance(e))
    assert expected > 5 * _mc_tolerance(e)  # the source is visible above the Monte Carlo error


# ---- 5. intermediate-state scattering ------------------------------------------------------
INTERMEDIATE_HZ, SCATTER_RABI_HZ = 1e9, 1e6


def _scattering_loss(tmp_path, leg_ratio: float, ladder: bool) -> float:
    """Loss of a Rydberg π pulse from |1⟩, the differential light shift cancelled by the detuning."""
    upper = math.sqrt(2 * INTERMEDIATE_HZ * SCATTER_RABI_HZ / leg_ratio)  # Ω_eff = Ω₁Ω₂/2Δ (all /2π)
    lower = leg_ratio * upper
    light_shift = (lower**2 - upper**2) / (4 * INTERMEDIATE_HZ)  # δ acts as δ + (Ω₁² − Ω₂²)/4Δ
    rydberg = f"intermediate {INTERMEDIATE_HZ} Hz  lower_rabi {lower} Hz  upper_rabi {upper} Hz"
    body = f"pulse mw_a area pi\npulse ryd_a area pi rabi {SCATTER_RABI_HZ} Hz detuning {-light_shift} Hz"
    result = _simulate(tmp_path, body, ("scattering",), rydberg=rydberg, expect="|1>", ladder=ladder)
    assert _populations(result)[2] > 0.98  # the π pulse did transfer
    return result.expectations[0]["loss"]


def _adiabatic_scattering(leg_ratio: float) -> float:
    """P = (πΓ_e/4Δ)(Ω₁/Ω₂ + Ω₂/Ω₁) (docs/references.md, derived by adiabatic elimination)."""
    gamma_e = 1 / RB_D2_LIFETIME_S
    return math.pi * gamma_e / (4 * 2 * math.pi * INTERMEDIATE_HZ) * (leg_ratio + 1 / leg_ratio)


@pytest.mark.parametrize("leg_ratio", [1.0, 2.0])
def test_scattering_effective_model_matches_adiabatic_elimination(tmp_path, leg_ratio):
    """Effective model: Γ_e(Ω₁/2Δ)² from |1⟩ and Γ_e(Ω₂/2Δ)² from |r⟩, half the π pulse in each;
    Γ_e = 1/26.2348 ns for Rb 5P3/2 (Steck, published)."""
    loss = _scattering_loss(tmp_path, leg_ratio, ladder=False)
    assert loss == pytest.approx(_adiabatic_scattering(leg_ratio), rel=0.03)


@pytest.mark.parametrize("leg_ratio", [1.0, 2.0])
def test_scattering_explicit_ladder_matches_adiabatic_elimination(tmp_path, leg_ratio):
    """Explicit three-level ladder with |e⟩ decaying at Γ_e: the same loss to ~20% (textbook
    adiabatic elimination; square pulses scatter somewhat more through turn-on transients)."""
    loss = _scattering_loss(tmp_path, leg_ratio, ladder=True)
    assert loss == pytest.approx(_adiabatic_scattering(leg_ratio), rel=0.2)


# ---- 6. Rydberg decay with branching back to the qubit ---------------------------------------
@pytest.mark.parametrize("back,engine_name", [(0.0, "fast"), (0.4, "lindblad")])
@pytest.mark.parametrize("wait_us", [50, 200])
def test_decay_branching_follows_exponential_law(tmp_path, back, engine_name, wait_us):
    """Exponential decay law at Γ = 1/τ (τ from seqlang.atoms.rydberg.lifetime_s): after t in |r⟩,
    f(1 − e^{−Γt}) is back in the qubit (half in |0⟩, half in |1⟩) and (1 − f)(1 − e^{−Γt}) is lost."""
    body = f"pulse mw_a area pi\npulse ryd_a area pi\nwait {wait_us} us"
    result = _simulate(tmp_path, body, ("decay",), species=f"decay_to_qubit {back}")
    assert result.engine == engine_name  # decay back into the qubit needs density matrices
    program = seqlang.load(_write(tmp_path, body, species=f"decay_to_qubit {back}")).program
    sp = program.rig.species["a"]
    tau = rydberg.lifetime_s(sp.data, sp.rydberg, program.rig.environment_k).total_s
    t = wait_us * 1e-6 + RYD_HALF_PI_S  # on average half the π pulse is spent in |r⟩
    decayed = 1 - math.exp(-t / tau)
    p = _populations(result)
    lost = result.expectations[0]["loss"]
    assert p[0] == pytest.approx(back * decayed / 2, abs=2e-4)
    assert p[1] == pytest.approx(back * decayed / 2, abs=2e-4)
    assert lost == pytest.approx((1 - back) * decayed, rel=2e-3)
    assert p[2] == pytest.approx(1 - decayed, rel=2e-3)


# ---- 7. decay-limited two-pulse CZ ------------------------------------------------------------
def _levine_time_in_rydberg(steps: int = 2000) -> float:
    """T_R·Ω of the Levine et al. gate averaged over |00⟩, |01⟩, |10⟩, |11⟩ with perfect blockade:
    |01⟩ is a two-level system at Ω, |11⟩ one at √2Ω (derived; integrated with scipy's expm)."""
    ratio, tau, jump = 0.377371, 4.29268, 3.90242  # docs/references.md (memory; reproduced numerically)

    def integral(coupling: float) -> float:
        psi, dt, occupation = np.array([1, 0], complex), tau / steps, [0.0]
        for phase in (0.0, -jump):
            h = np.array([[0, coupling / 2 * np.exp(-1j * phase)], [coupling / 2 * np.exp(1j * phase), -ratio]])
            step = expm(-1j * h * dt)
            for _ in range(steps):
                psi = step @ psi
                occupation.append(abs(psi[1]) ** 2)
        return trapezoid(occupation, dx=dt)
    return (2 * integral(1.0) + integral(math.sqrt(2))) / 4


def test_two_pulse_cz_time_in_rydberg_is_published_value():
    """T_R·Ω ≈ 3.29 for the two-pulse gate of Levine et al., PRL 123, 170503 (2019), averaged over
    the four inputs in perfect blockade (docs/references.md, derived). The simulated decay error
    against Γ·T_R (to 1 %, finite blockade) is in tests/test_physics_tight.py."""
    assert _levine_time_in_rydberg() == pytest.approx(3.29, abs=0.02)


# ---- 8. imaging and preparation ----------------------------------------------------------------
@pytest.mark.parametrize("area,bright", [("pi/3", 0.25), ("2pi/3", 0.75), ("pi", 1.0)])
def test_readout_errors_follow_confusion_matrix(tmp_path, area, bright):
    """Reported bright probability p(1 − fn) + (1 − p)fp with p = sin²(θ/2) (confusion matrix,
    common practice; Rabi formula on resonance)."""
    fp, fn = 0.03, 0.08
    result = _simulate(tmp_path, f"pulse mw_a area {area}\nimage a -> rec", ("imaging",), shots=10,
                       image=f"false_positive {fp}  false_negative {fn}")
    assert result.records["rec"]["q"] == pytest.approx(bright * (1 - fn) + (1 - bright) * fp, abs=1e-9)


def test_imaging_loss_removes_bright_atoms_between_images(tmp_path):
    """Loss l per imaging of a bright atom: the second image is bright with (1 − l) times the first
    probability, within the binomial error of the shot count (common practice)."""
    loss, shots = 0.10, 1000
    result = _simulate(tmp_path, "pulse mw_a area pi\nimage a -> first\nimage a -> second", ("imaging",),
                       shots=shots, image=f"loss {loss}")
    first, second = result.records["first"]["q"], result.records["second"]["q"]
    assert first == pytest.approx(1.0, abs=1e-9)
    assert second == pytest.approx((1 - loss) * first, abs=4 * math.sqrt(loss * (1 - loss) / shots))


def test_preparation_error_starts_atoms_lost(tmp_path):
    """prep_error ε: P(|x⟩) = ε within the binomial error √(ε(1 − ε)/N) (common practice)."""
    eps, shots = 0.05, 2000
    result = _simulate(tmp_path, "pulse mw_a area pi", ("preparation",), shots=shots, species=f"prep_error {eps}")
    assert _populations(result)[3] == pytest.approx(eps, abs=4 * math.sqrt(eps * (1 - eps) / shots))
    assert result.expectations[0]["loss"] == pytest.approx(_populations(result)[3], abs=1e-9)


# ---- 9. finite shots ---------------------------------------------------------------------------
HALF_PI_NOISY = ("pulse mw_a area pi/2", ("intensity",))
INTENSITY_NOISE = 0.05


def _half_pi(tmp_path, shots, seed=7, repetitions=None):
    body, sources = HALF_PI_NOISY
    return _simulate(tmp_path, body, sources, shots=shots, seed=seed, repetitions=repetitions,
                     microwave=f"intensity_noise {INTENSITY_NOISE}").expectations[0]


def test_sampled_counts_are_reproducible_and_binomial(tmp_path):
    """repetitions=N: a histogram of N draws, the same for a seed; error bars √(p(1−p)/N) (binomial)."""
    n = 500
    a, b = _half_pi(tmp_path, 100, repetitions=n), _half_pi(tmp_path, 100, repetitions=n)
    assert sum(a["sampled_counts"].values()) == n
    assert a["sampled_counts"] == b["sampled_counts"]
    for label, p in a["populations"].items():
        assert a["sampled_error"][label] == pytest.approx(math.sqrt(p * (1 - p) / n), rel=1e-6)
        assert a["sampled_counts"][label] == pytest.approx(n * p, abs=5 * math.sqrt(n * p * (1 - p)) + 1)


def test_monte_carlo_error_shrinks_as_one_over_root_shots(tmp_path):
    """P(1) = (1 + sin(πε/2))/2 ≈ 1/2 + πε/4 for a π/2 pulse with relative Rabi error ε ~ N(0, σ²):
    standard error (πσ/4)/√N (derived), so 100 → 400 shots halves it (1/√N, textbook)."""
    few, many = _half_pi(tmp_path, 100), _half_pi(tmp_path, 400)
    assert few["fidelity_error"] / many["fidelity_error"] == pytest.approx(2, rel=0.3)
    assert many["fidelity_error"] == pytest.approx(math.pi * INTENSITY_NOISE / 4 / math.sqrt(400), rel=0.25)


# ---- 10. interrupted runs keep finished chunks ----------------------------------------------------
def test_interrupt_keeps_the_finished_chunk(tmp_path, monkeypatch):
    """A KeyboardInterrupt during the second chunk of shots returns the first chunk, marked."""
    real_run, calls = engine.run, []

    def interrupted_run(*args, **kwargs):
        calls.append(1)
        if len(calls) == 2:
            raise KeyboardInterrupt
        return real_run(*args, **kwargs)
    monkeypatch.setattr(engine, "run", interrupted_run)
    from seqlang.sim import api
    shots = 3 * api.SHOT_CHUNK
    body, sources = HALF_PI_NOISY
    result = _simulate(tmp_path, body, sources, shots=shots, microwave=f"intensity_noise {INTENSITY_NOISE}")
    assert "interrupted" in result.noise
    assert result.noise["shots"] == api.SHOT_CHUNK
    assert 0.4 < result.expectations[0]["fidelity"] < 0.6  # the kept shots are real π/2 shots


# ---- 11. error budget -------------------------------------------------------------------------------
def test_budget_lists_every_source_and_all_costs_at_least_none():
    """The budget runs each source alone, none and all with common random numbers (common practice)."""
    numbers = budget.budget(seqlang.load(str(ROOT / "programs" / "bell_pair.seq")), shots=40, seed=3)
    entry = numbers["expectations"][0]
    assert set(entry["infidelity"]) == set(noise.SOURCES) | {"none", "all"}
    assert entry["infidelity"]["all"] >= entry["infidelity"]["none"]
    assert entry["infidelity"]["decay"] > entry["infidelity"]["none"]  # Rydberg decay costs fidelity
    assert entry["error"]["none"] is None and entry["error"]["decay"] is None  # exact numbers: no error bar
    assert entry["error"]["intensity"] > 0 and entry["error"]["all"] > 0  # sampled: a real Monte Carlo error
