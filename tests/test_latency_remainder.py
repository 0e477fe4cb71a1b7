"""Latencies that are not whole ticks: the remainder per output, its warning, its report.

The expected remainders are exact arithmetic in the test (fractions of a nanosecond,
Python's round-half-to-even as the compiler documents), not read back from the code.
"""
from __future__ import annotations

import json
from fractions import Fraction

import pytest

from seqlang.compile.hardware import LATENCY_REMAINDER_WARN
from seqlang.compile.pipeline import check
from seqlang.emit.tables import timing_json
from seqlang.show import compile_summary

TICK_NS = 2
RIG = """
rig latbench {
  tick 2 ns
  species a = Rb87 { rydberg 70S1/2 }
  drive mw_a microwave a { rabi 2 MHz  port awg0.1  latency %s ns }
  drive ryd_a rydberg a { rabi 5 MHz  port awg1.1  gate ttl.4  latency 410 ns }
}
"""
SEQ = 'use "l.rig"\nsite q = a at (0, 0) um\nsequence l {\n  pulse mw_a area pi\n  pulse ryd_a area pi\n}\n'


def _checked(tmp_path, latency_ns: str):
    (tmp_path / "l.rig").write_text(RIG % latency_ns)
    (tmp_path / "l.seq").write_text(SEQ)
    return check(str(tmp_path / "l.seq"))


def _expected_remainder_ns(latency_ns: str) -> Fraction:
    exact = Fraction(latency_ns)
    return exact - round(exact / TICK_NS) * TICK_NS  # round() on a Fraction: half to even


@pytest.mark.parametrize("latency_ns", ["80", "81", "83", "80.4", "80.6", "410.6"])
def test_remainder_is_reported_per_output(tmp_path, latency_ns):
    checked = _checked(tmp_path, latency_ns)
    expected = float(_expected_remainder_ns(latency_ns))
    assert checked.plan.latency_remainder_s["awg0.1"] * 1e9 == pytest.approx(expected, abs=1e-9)
    assert checked.plan.latency_remainder_s["awg1.1"] == 0.0
    document = json.loads(timing_json(checked))
    assert document["latency_remainder_ns"]["awg0.1"] == pytest.approx(expected, abs=1e-9)
    summary = compile_summary(checked)
    if expected:
        assert "latency remainders" in summary and "awg0.1" in summary and "awg1.1" not in summary
    else:
        assert "latency remainders" not in summary


@pytest.mark.parametrize("latency_ns", ["80", "81", "83", "80.4", "80.6"])
def test_warning_above_a_quarter_tick_points_at_the_declaration(tmp_path, latency_ns):
    checked = _checked(tmp_path, latency_ns)
    warned = [d for d in checked.warnings if "not a whole number" in d.message]
    should = abs(_expected_remainder_ns(latency_ns)) > Fraction(LATENCY_REMAINDER_WARN) * TICK_NS
    assert bool(warned) == should
    if should:
        (w,) = warned
        assert w.span.line == 5 and "awg0.1" in w.message  # the drive mw_a line of the rig
        assert ("late" if _expected_remainder_ns(latency_ns) > 0 else "early") in w.message


def test_one_nanosecond_at_a_two_nanosecond_tick_compensates_nothing(tmp_path):
    """The case that used to pass silently: round(0.5) = 0 ticks, the whole 1 ns remains."""
    checked = _checked(tmp_path, "1")
    assert checked.plan.latency_ticks["awg0.1"] == 0
    assert checked.plan.latency_remainder_s["awg0.1"] == pytest.approx(1e-9, abs=1e-18)
