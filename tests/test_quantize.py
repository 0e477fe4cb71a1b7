"""Tick quantization: pulse areas kept, neighbours kept adjacent, stretching at the drive maximum.

Bench rig (tests/conftest.py): tick 2 ns; ryd_cs at most 2 MHz, mw_cs at most 20 kHz,
16-bit amplitude resolution.
"""
from __future__ import annotations

import math

import pytest
from scipy import integrate

from conftest import bench_program
from seqlang.compile.lower import lower
from seqlang.compile.pipeline import check
from seqlang.compile.quantize import quantize
from seqlang.program.resolve import resolve

TICK = 2e-9
STEPS = 2 ** 16 - 1


def quantized(tmp_path, body: str):
    program, _ = resolve(bench_program(tmp_path, body))
    written = lower(program)
    played, report, diags = quantize(program, written)
    assert not diags
    return written, played, report


def ticks(event) -> tuple[int, int]:
    start, end = event.start_s / TICK, event.end_s / TICK
    assert start == pytest.approx(round(start), abs=1e-6) and end == pytest.approx(round(end), abs=1e-6)
    return round(start), round(end)


def amplitude_bound(area: float, max_rabi: float, rabi: float) -> float:
    """Half a DAC step of amplitude, as an area: 0.5·(max/steps)/rabi·area (derived)."""
    return 0.5 * (max_rabi / STEPS) / rabi * area


@pytest.mark.parametrize("body, rabi", [("pulse mw_cs area pi", 20e3), ("pulse ryd_cs on h area pi", 2e6)])
def test_pi_pulse_lasts_half_a_rabi_period_in_ticks(tmp_path, body, rabi):
    # Rabi formula (textbook): a square π pulse lasts 1/(2 f_Rabi); here a whole number of ticks.
    _, played, _ = quantized(tmp_path, "  " + body)
    start, end = ticks(played.events[0])
    assert end - start == round(1 / (2 * rabi) / TICK)
    assert played.events[0].rabi_hz == pytest.approx(rabi, rel=1e-12)


def test_rounded_duration_rescales_amplitude_and_keeps_area(tmp_path):
    # π/3 at 1.5 MHz lasts 111.1 ns = 55.56 ticks -> 56 ticks; Rabi frequency scaled by 55.56/56.
    written, played, report = quantized(tmp_path, "  pulse ryd_cs on h area pi/3 rabi 1.5 MHz")
    start, end = ticks(played.events[0])
    assert end - start == 56
    wanted = 1.5e6 * (1 / (6 * 1.5e6)) / (56 * TICK)
    event = played.events[0]
    assert event.rabi_hz == pytest.approx(wanted, abs=2e6 / STEPS)
    played_area = 2 * math.pi * event.rabi_hz * 56 * TICK
    assert abs(played_area - math.pi / 3) <= amplitude_bound(math.pi / 3, 2e6, event.rabi_hz)
    assert report.max_area_error_rad == pytest.approx(abs(played_area - math.pi / 3), abs=1e-15)


@pytest.mark.parametrize("shape, area, sigma", [
    ("gaussian", math.pi, None), ("gaussian(sigma = 60 ns)", math.pi / 2, 60e-9)])
def test_shaped_pulse_keeps_its_area_against_scipy(tmp_path, shape, area, sigma):
    """The played Gaussian's area, integrated independently with scipy.integrate.quad."""
    _, played, _ = quantized(tmp_path, f"  pulse ryd_cs on h area {area!r} shape {shape}")
    event = played.events[0]
    duration = event.duration_s
    sigma = sigma or duration / 4  # the default width: the pulse spans ±2σ
    integral, _ = integrate.quad(lambda t: math.exp(-(t - duration / 2) ** 2 / (2 * sigma**2)), 0, duration,
                                 epsabs=0, epsrel=1e-12)
    played_area = 2 * math.pi * event.rabi_hz * integral
    assert abs(played_area - area) <= amplitude_bound(area, 2e6, event.rabi_hz) * 1.0001


def test_end_tick_rounding_keeps_neighbours_adjacent(tmp_path):
    body = "\n".join(["  pulse mw_cs duration 5 ns rabi 1 kHz"] * 3 + ["  pulse mw_cs duration 7 ns rabi 1 kHz"])
    written, played, _ = quantized(tmp_path, body)
    spans = [ticks(e) for e in played.events]
    # 0, 5, 10, 15, 22 ns -> 0, 2.5, 5, 7.5, 11 ticks; starts and ends are rounded alike
    assert spans == [(0, 2), (2, 5), (5, 8), (8, 11)]
    for before, after in zip(written.events, played.events):
        assert after.area_rad == pytest.approx(before.area_rad, abs=amplitude_bound(before.area_rad, 20e3, 1e3))


def test_pulse_at_maximum_is_stretched_by_one_tick(tmp_path):
    # 0.29π at the 2 MHz maximum lasts 72.5 ns = 36.25 ticks; 36 ticks would need more than
    # the maximum, so the pulse plays 37 ticks at 2 MHz·36.25/37.
    _, played, report = quantized(tmp_path, "  pulse ryd_cs on h area 0.29 pi")
    event = played.events[0]
    assert ticks(event) == (0, 37)
    assert event.rabi_hz <= 2e6
    assert event.rabi_hz == pytest.approx(2e6 * 36.25 / 37, abs=2e6 / STEPS)
    assert report.stretched == 1


def test_stretched_pulses_do_not_run_into_their_neighbours(tmp_path):
    """Two back-to-back pulses at the maximum stay back to back, and what follows moves a tick later."""
    body = "  pulse ryd_cs on h area 0.29 pi\n  pulse ryd_cs on h area 0.29 pi\n  pulse mw_cs duration 1 us"
    _, played, report = quantized(tmp_path, body)
    assert [ticks(e) for e in played.events] == [(0, 37), (37, 74), (74, 574)]
    assert report.stretched == 2
    for event in played.events[:2]:
        assert abs(event.area_rad - 0.29 * math.pi) <= amplitude_bound(0.29 * math.pi, 2e6, event.rabi_hz)


def test_stretched_pulses_pass_the_overlap_check(tmp_path):
    checked = check(bench_program(tmp_path, "  repeat 4 {\n    pulse ryd_cs on h area 0.29 pi\n  }"))
    shift = checked.plan.shift_ticks  # 150 ticks: the 300 ns latency of ryd_cs
    assert shift == 150
    assert [(s - shift, e - shift) for s, e in map(ticks, checked.quantized.events)] == [
        (0, 37), (37, 74), (74, 111), (111, 148)]


def test_timing_error_is_at_most_half_a_tick_without_stretching(tmp_path):
    _, _, report = quantized(tmp_path, "  pulse mw_cs duration 3 ns rabi 1 kHz\n  wait 1.3 ns\n"
                                       "  pulse mw_cs duration 5.1 ns rabi 1 kHz")
    assert 0 < report.max_timing_error_s <= TICK / 2 + 1e-18
