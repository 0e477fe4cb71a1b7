"""Pulse envelopes against closed-form areas.

* Gaussian: ∫₀ᵀ exp(-(t-T/2)²/2σ²) dt = σ·sqrt(2π)·erf(T/(2·sqrt(2)·σ)) — the standard
  Gaussian integral (common practice; any table of integrals).
* Blackman window w(t) = 0.42 - 0.5 cos(2πt/T) + 0.08 cos(4πt/T): the cosines integrate to
  zero over a full period, so the area is 0.42·T (standard window definition, common practice).
* Flat top with sin² ramps: over a ramp of length r, ∫ sin²(πt/2r) dt = r/2 (derived:
  sin² averages to 1/2 over a quarter period), so two ramps lose r and the area is T - r.
"""
from __future__ import annotations

import math

import pytest

from seqlang.compile.envelopes import area_factor, duration_for_area, envelope, pulse_area
from seqlang.program.model import Shape


def _gaussian_area(sigma: float, duration: float) -> float:
    return sigma * math.sqrt(2 * math.pi) * math.erf(duration / (2 * math.sqrt(2) * sigma))


@pytest.mark.parametrize("duration, sigma", [(1e-6, 0.25e-6), (400e-9, 60e-9), (2e-6, 1.5e-6)])
def test_gaussian_area_matches_error_function(duration, sigma):
    shape = Shape("gaussian", (("sigma", sigma),))
    assert area_factor(shape, duration) == pytest.approx(_gaussian_area(sigma, duration), rel=1e-9)


def test_gaussian_default_sigma_is_a_quarter_of_the_duration():
    duration = 800e-9
    assert area_factor(Shape("gaussian"), duration) == pytest.approx(_gaussian_area(duration / 4, duration), rel=1e-9)


@pytest.mark.parametrize("duration", [100e-9, 1e-6, 37e-6])
def test_blackman_area_is_042_of_duration(duration):
    assert area_factor(Shape("blackman"), duration) == pytest.approx(0.42 * duration, rel=1e-9)


@pytest.mark.parametrize("duration, ramp", [(1e-6, 100e-9), (300e-9, 40e-9), (80e-9, 40e-9)])
def test_ramped_area_is_duration_minus_one_ramp(duration, ramp):
    shape = Shape("ramped", (("ramp", ramp),))
    assert area_factor(shape, duration) == pytest.approx(duration - ramp, rel=1e-9)


def test_ramped_envelope_is_flat_in_the_middle_and_zero_at_the_ends():
    shape, duration = Shape("ramped", (("ramp", 50e-9),)), 500e-9
    values = envelope(shape, duration, [0.0, 25e-9, 250e-9, duration])
    assert values == pytest.approx([0.0, 0.5, 1.0, 0.0], abs=1e-12)


def test_square_pi_pulse_follows_the_rabi_formula():
    """A resonant square pulse rotates by 2π·f_Rabi·T; a π pulse lasts 1/(2 f_Rabi) (Rabi formula)."""
    rabi = 1.3e6
    assert duration_for_area(Shape("square"), math.pi, rabi) == pytest.approx(1 / (2 * rabi), rel=1e-12)
    assert pulse_area(Shape("square"), 2e-6, rabi) == pytest.approx(2 * math.pi * rabi * 2e-6, rel=1e-12)


SHAPES = [Shape("square"), Shape("blackman"), Shape("gaussian"), Shape("gaussian", (("sigma", 1e-6),)),
          Shape("ramped", (("ramp", 40e-9),))]


@pytest.mark.parametrize("shape", SHAPES, ids=lambda s: s.kind + ("-" + "-".join(k for k, _ in s.params)))
@pytest.mark.parametrize("area", [math.pi / 2, math.pi, 3 * math.pi])
def test_duration_for_area_inverts_pulse_area(shape, area):
    rabi = 1.0e6
    duration = duration_for_area(shape, area, rabi)
    assert duration > 0
    assert pulse_area(shape, duration, rabi) == pytest.approx(area, rel=1e-9)


def test_gaussian_of_fixed_sigma_cannot_exceed_its_full_area():
    """However long, a Gaussian of width σ has at most the area σ·sqrt(2π) (Gaussian integral)."""
    sigma, rabi = 60e-9, 1e6
    ceiling = 2 * math.pi * rabi * sigma * math.sqrt(2 * math.pi)
    with pytest.raises(ValueError):
        duration_for_area(Shape("gaussian", (("sigma", sigma),)), 1.01 * ceiling, rabi)
