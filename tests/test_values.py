"""Values that reach a table or the simulator: finite, in range, and what rounding does to them.

Covers issue items that are not bad-program cases (those live in tests/bad/):
warnings, the hold rows that split long gaps, the emitters' last line of defence,
narrow envelopes and their samples.
"""
from __future__ import annotations

import json
import math

import numpy as np
import pytest

from conftest import bench_program
from seqlang.compile import envelopes
from seqlang.compile.pipeline import check
from seqlang.compile.timeline import evolve
from seqlang.emit.tables import timing_csv, timing_json
from seqlang.emit.waveforms import waveform_arrays
from seqlang.lang.diagnostics import SeqlangError
from seqlang.program.model import Shape

TICK = 2e-9  # the bench rig's tick (tests/conftest.py)
COUNTER = 2**32 - 1


def test_wait_shorter_than_a_tick_warns_with_its_length(tmp_path):
    checked = check(bench_program(tmp_path, "  pulse mw_cs area pi\n  wait 0.5 ns\n  pulse mw_cs area pi"))
    messages = [w.message for w in checked.warnings]
    assert messages == ["this 500 ps wait is shorter than one tick (2 ns): tick rounding removes it or "
                        "stretches it to a whole tick"]


def test_long_wait_is_split_into_counter_sized_hold_rows(tmp_path):
    # 20 s at 2 ns is 10^10 ticks: three holds of at most 2^32 - 1 ticks bridge the gap.
    checked = check(bench_program(tmp_path, "  pulse mw_cs area pi\n  wait 20 s\n  pulse mw_cs area pi"))
    rows = checked.plan.rows()
    holds = [r for r in rows if r.kind == "hold"]
    assert checked.plan.holds == len(holds) == 2
    issue_ticks = [r.tick for r in rows]
    assert all(b - a <= COUNTER for a, b in zip([0] + issue_ticks, issue_ticks))
    assert all(r.port == "sequencer" and r.ticks <= COUNTER for r in holds)
    assert json.loads(timing_json(checked))["report"]["hold_rows"] == 2
    assert "sequencer" in timing_csv(checked)


def test_hold_rows_are_counted_before_they_are_built(tmp_path, monkeypatch):
    """The count that bounds the hold rows is the number built (ceil(gap / counter) − 1 per gap,
    worked out here by hand), and one more than the bound is an error at the event after the gap."""
    from seqlang.compile import hardware
    checked = check(bench_program(tmp_path, "  pulse mw_cs area pi\n  wait 60 s\n  pulse mw_cs area pi\n"
                                            "  wait 30 s\n  pulse mw_cs area pi"))
    ticks = [r.tick for r in checked.plan.rows() if r.kind != "hold"]
    by_hand = sum(max(0, math.ceil((b - a) / COUNTER) - 1) for a, b in zip([0] + ticks, ticks))
    assert checked.plan.holds == by_hand == 6 + 3   # 3·10¹⁰ and 1.5·10¹⁰ ticks
    monkeypatch.setattr(hardware, "MAX_HOLD_ROWS", by_hand - 1)
    with pytest.raises(SeqlangError) as failure:
        check(bench_program(tmp_path, "  pulse mw_cs area pi\n  wait 60 s\n  pulse mw_cs area pi\n"
                                      "  wait 30 s\n  pulse mw_cs area pi"))
    (diagnostic,) = failure.value.diagnostics
    assert diagnostic.message.startswith(f"the tables would need {by_hand:,} hold rows")
    assert diagnostic.span == checked.timeline.pulses()[1].span   # after the longest gap (60 s)


def test_short_waits_need_no_hold_rows(tmp_path):
    checked = check(bench_program(tmp_path, "  pulse mw_cs area pi\n  wait 8 s\n  pulse mw_cs area pi"))
    assert checked.plan.holds == 0


def _poisoned(checked, **fields):
    """The checked program with one played event changed after the checks (as a bug would)."""
    events = list(checked.quantized.events)
    events[0] = evolve(events[0], **fields)
    quantized = evolve(checked.quantized, events=tuple(events))
    return evolve(checked, quantized=quantized)


@pytest.mark.parametrize("value", [math.nan, math.inf, -math.inf])
def test_emitters_refuse_a_non_finite_value_as_a_last_line_of_defence(tmp_path, value):
    checked = check(bench_program(tmp_path, "  pulse ryd_na area pi shape gaussian"))
    bad = _poisoned(checked, phase_rad=value)
    for writer in (timing_csv, timing_json, waveform_arrays):
        with pytest.raises(SeqlangError) as caught:
            writer(bad)
        assert caught.value.diagnostics[0].span == checked.quantized.events[0].span
        assert "non-finite" in caught.value.diagnostics[0].message


def test_timing_json_is_strict(tmp_path):
    checked = check(bench_program(tmp_path, "  pulse mw_cs area pi phase 0.3 rad"))
    json.loads(timing_json(checked), parse_constant=lambda c: pytest.fail(f"non-finite {c} in JSON"))


def test_narrow_gaussian_keeps_its_area_in_a_long_window(tmp_path):
    """σ = 100 ns in a 1 ms window: area σ·√(2π)·erf(T/(2√2σ)) (Gaussian integral, common practice)."""
    shape = Shape("gaussian", (("sigma", 100e-9),))
    assert envelopes.area_factor(shape, 1e-3) == pytest.approx(100e-9 * math.sqrt(2 * math.pi), rel=1e-12)
    checked = check(bench_program(tmp_path, "  pulse ryd_na duration 1 ms rabi 1 MHz shape gaussian(sigma = 100 ns)"))
    pulse = checked.quantized.events[0]
    assert pulse.area_rad == pytest.approx(2 * math.pi * 1e6 * 100e-9 * math.sqrt(2 * math.pi), rel=1e-6)


def test_sampled_area_agrees_with_numpy_trapezoid_on_the_written_samples(tmp_path):
    checked = check(bench_program(tmp_path, "  pulse ryd_na area pi/4 shape gaussian(sigma = 100 ns)"))
    pulse = checked.quantized.events[0]
    arrays = waveform_arrays(checked)
    t, rabi = arrays["event0_t_ns"] * 1e-9, arrays["event0_rabi_hz"]
    reference = 2 * math.pi * np.trapezoid(rabi, t)  # numpy's trapezoid rule on the very samples written
    mine = 2 * math.pi * pulse.rabi_hz * envelopes.sampled_area_factor(pulse.shape, pulse.duration_s, 500e6)
    assert mine == pytest.approx(reference, rel=1e-12)
    assert reference == pytest.approx(math.pi / 4, rel=1e-3)


@pytest.mark.parametrize("duration, ramp", [(1e-12, 40e-9), (5e-9, 40e-9), (79e-9, 40e-9), (1e-3, 1e-9)])
def test_ramped_area_has_no_cancellation(duration, ramp):
    """Ramps that meet: 2∫₀^{T/2} sin²(πt/2r) dt, checked against scipy's adaptive quadrature."""
    from scipy import integrate
    shape = Shape("ramped", (("ramp", ramp),))
    reference, _ = integrate.quad(lambda t: float(envelopes.envelope(shape, duration, t)), 0, duration,
                                  points=sorted({min(ramp, duration / 2), max(duration - ramp, duration / 2)}), epsabs=0, epsrel=1e-13, limit=200)
    assert envelopes.area_factor(shape, duration) == pytest.approx(reference, rel=1e-9)


def test_block_nesting_limit_has_its_own_message(tmp_path):
    blocks = "".join(f"block b{i}() {{\n  do b{i + 1}()\n}}\n" for i in range(70)) + \
        "block b70() {\n  pulse mw_cs area pi\n}\n"
    path = bench_program(tmp_path, "  do b0()", tail=blocks)
    with pytest.raises(SeqlangError) as caught:
        check(path)
    assert caught.value.diagnostics[0].message.startswith("blocks are nested more than 64 deep here")


def test_sixty_four_nested_blocks_are_fine(tmp_path):
    blocks = "".join(f"block b{i}() {{\n  do b{i + 1}()\n}}\n" for i in range(63)) + \
        "block b63() {\n  pulse mw_cs area pi\n}\n"
    assert len(check(bench_program(tmp_path, "  do b0()", tail=blocks)).quantized.events) == 1


def test_total_ends_with_the_last_pulse(tmp_path):
    """385 ns is 192.5 ticks: the pulse ends at tick 192 (384 ns) and so does the sequence (issue 17)."""
    from seqlang.show import compile_summary
    checked = check(bench_program(tmp_path, "  pulse mw_cs duration 385 ns rabi 10 kHz"))
    assert checked.quantized.events[-1].end_s == pytest.approx(384e-9, abs=1e-15)
    assert checked.quantized.duration_s == pytest.approx(384e-9, abs=1e-15)
    assert "total 384 ns (written 385 ns −" in compile_summary(checked)
