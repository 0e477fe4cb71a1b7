"""Unit tests of the passes: units, spans, resolving, placement, hardware plan, quantization.

Programs are written into tmp_path with a small invented rig (tick 2 ns).
"""
from __future__ import annotations

import math
from pathlib import Path

import pytest

import seqlang
from seqlang.lang import units
from seqlang.lang.diagnostics import SeqlangError
from seqlang.lang.parser import parse_text
from seqlang.lang.units import DURATION, FREQUENCY, Quantity

RIG = """rig passbench {
  tick 2 ns
  species na = Na23 { qubit clock  rydberg 58S1/2 }
  drive mw microwave na { rabi 25 kHz  port awg0.1  latency 100 ns }
  drive ryd rydberg na { rabi 1 MHz  port awg1.1  gate ttl.4  gate_lead 100 ns  gate_lag 40 ns
                         latency 400 ns  rise 20 ns }
  drive ram raman na { rabi 200 kHz  port awg0.3 }
  port trig = ttl.7 { kind digital }
}
"""
HEADER = 'use "bench.rig"\nsite a = na at (0, 0) um\n'


def _load(tmp_path: Path, body: str, extra: str = "") -> seqlang.api.Sequence:
    (tmp_path / "bench.rig").write_text(RIG)
    path = tmp_path / "p.seq"
    path.write_text(HEADER + extra + "sequence s {\n" + body + "\n}\n")
    return seqlang.load(str(path))


def _errors(tmp_path: Path, body: str, extra: str = "") -> list[str]:
    with pytest.raises(SeqlangError) as info:
        _load(tmp_path, body, extra)
    return [d.message for d in info.value.diagnostics]


# ---- units -------------------------------------------------------------------
def test_inverse_frequency_is_a_duration():
    one_mhz = Quantity(1e6, FREQUENCY)
    result = Quantity(1.0) / (Quantity(2 * math.pi) * one_mhz)
    assert result.dim == DURATION
    assert result.value == pytest.approx(1 / (2 * math.pi * 1e6))


def test_unit_scale_factors():
    assert units.UNITS["MHz"] == (1e6, FREQUENCY)
    assert units.UNITS["us"][0] == pytest.approx(1e-6)
    assert Quantity(1.3e6, FREQUENCY).describe() == "1.3 MHz"


def test_fractional_power_of_a_dimensioned_value_is_refused():
    with pytest.raises(ValueError):
        Quantity(4e-6, DURATION).power(0.5)
    assert Quantity(3e-6, DURATION).power(2).dim == units._dim(s=2)


def test_adding_a_duration_to_a_frequency_is_a_kind_error(tmp_path):
    messages = _errors(tmp_path, "  wait t", extra="let t = 1 us + 1 MHz\n")
    assert any("duration" in m and "frequency" in m for m in messages), messages


def test_unit_binds_tighter_than_division(tmp_path):
    """`1 / 2 us` is 1/(2 us), a frequency, so it is not a valid wait."""
    assert "expected a duration, got a frequency" in _errors(tmp_path, "  wait 1 / 2 us")


# ---- spans ---------------------------------------------------------------------
def test_span_of_the_unit_token():
    let = parse_text("let f = 30 MHz", "x.seq").items[0]
    assert (let.value.unit_span.column, let.value.unit_span.end_column) == (12, 15)
    assert (let.value.span.column, let.value.span.end_column) == (9, 15)
    assert "let f = 30 MHz"[let.value.unit_span.start:let.value.unit_span.end] == "MHz"


# ---- resolver ------------------------------------------------------------------
def test_square_pi_pulse_lasts_half_a_rabi_period(tmp_path):
    """Rabi formula: a resonant square pulse of area π lasts 1/(2 f_Rabi); rabi defaults to the maximum."""
    pulse = _load(tmp_path, "  pulse mw area pi").timeline.events[0]
    assert pulse.rabi_hz == pytest.approx(25e3)
    assert pulse.duration_s == pytest.approx(1 / (2 * 25e3), rel=1e-12)
    assert (pulse.detuning_hz, pulse.phase_rad, pulse.shape.kind) == (0.0, 0.0, "square")


def test_duration_and_area_give_the_rabi_frequency(tmp_path):
    pulse = _load(tmp_path, "  pulse mw area pi/2 duration 40 us").timeline.events[0]
    assert pulse.rabi_hz == pytest.approx(math.pi / 2 / (2 * math.pi * 40e-6), rel=1e-12)


# ---- placement -----------------------------------------------------------------
@pytest.mark.parametrize("align, offset_us", [("start", 0.0), ("end", 10.0), ("center", 5.0)])
def test_together_alignment(tmp_path, align, offset_us):
    body = f"  together align {align} {{\n    wait 20 us\n    switch trig on\n    pulse mw duration 10 us\n  }}"
    events = _load(tmp_path, body).timeline.events
    pulse = next(e for e in events if e.kind == "pulse")
    assert pulse.start_s == pytest.approx(offset_us * 1e-6, abs=1e-15)


def test_together_lasts_as_long_as_its_longest_part(tmp_path):
    body = "  together {\n    wait 20 us\n    pulse mw duration 10 us\n  }\n  switch trig on"
    events = _load(tmp_path, body).timeline.events
    assert events[-1].kind == "switch" and events[-1].start_s == pytest.approx(20e-6)


def test_repeat_places_copies_one_period_apart(tmp_path):
    body = "  repeat 3 {\n    pulse mw duration 10 us\n    wait 5 us\n  }"
    timeline = _load(tmp_path, body).timeline
    assert [e.start_s for e in timeline.events] == pytest.approx([0.0, 15e-6, 30e-6])
    assert timeline.duration_s == pytest.approx(45e-6)


# ---- hardware plan -------------------------------------------------------------
def test_latency_shifts_the_sequence_later(tmp_path):
    """The ryd output needs 400 ns of latency, its gate 100 ns of lead: everything moves 200 ticks later."""
    plan = _load(tmp_path, "  pulse ryd duration 1 us").compile()
    assert plan.shift_ticks == 200
    (pulse,) = plan.ports["awg1.1"]
    assert pulse.tick == 0  # light arrives at tick 200, issued 400 ns (200 ticks) earlier
    assert plan.timeline.events[0].start_s == pytest.approx(400e-9)


def test_gate_opens_lead_before_and_closes_lag_after(tmp_path):
    plan = _load(tmp_path, "  wait 2 us\n  pulse ryd duration 1 us").compile()
    (pulse,), (gate,) = plan.ports["awg1.1"], plan.ports["ttl.4"]
    light_tick = pulse.tick + 200  # issue tick plus the 400 ns latency
    assert gate.tick == light_tick - 50
    assert gate.ticks == 500 + 50 + 20


def test_close_gates_merge_into_one_window(tmp_path):
    body = "  pulse ryd duration 1 us\n  wait 60 ns\n  pulse ryd duration 1 us"
    plan = _load(tmp_path, body).compile()
    assert len(plan.ports["awg1.1"]) == 2
    (gate,) = plan.ports["ttl.4"]
    assert gate.ticks == 50 + 500 + 30 + 500 + 20


def test_distant_gates_stay_separate(tmp_path):
    body = "  pulse ryd duration 1 us\n  wait 1 us\n  pulse ryd duration 1 us"
    assert len(_load(tmp_path, body).compile().ports["ttl.4"]) == 2


# ---- quantization --------------------------------------------------------------
def test_quantization_keeps_neighbours_adjacent(tmp_path):
    """Back-to-back pulses of odd lengths are rounded to ticks without gaps or overlaps."""
    body = "  pulse mw duration 1.003 us\n  pulse mw duration 2.999 us\n  pulse mw duration 1.001 us"
    played = _load(tmp_path, body).played.events
    tick = 2e-9
    for before, after in zip(played, played[1:]):
        assert round(before.end_s / tick) == round(after.start_s / tick)
    for event in played:
        assert event.start_s / tick == pytest.approx(round(event.start_s / tick), abs=1e-6)


def test_quantization_keeps_the_pulse_area(tmp_path):
    sequence = _load(tmp_path, "  pulse mw area pi duration 20.001 us")
    wanted = sequence.timeline.events[0].area_rad
    played = sequence.played.events[0]
    assert played.duration_s == pytest.approx(round(20.001e-6 / 2e-9) * 2e-9)
    assert played.area_rad == pytest.approx(wanted, abs=1e-3)


def test_two_drives_on_one_transition_at_once_are_warned(tmp_path):
    """Microwave and Raman both drive the qubit transition: played together the simulator (one
    drive frame per transition) would add their detunings, so check says so."""
    together = _load(tmp_path, "  together {\n    pulse mw area pi detuning 5 kHz\n    pulse ram area pi\n  }")
    messages = [w.message for w in together.warnings]
    assert any("`ram` and `mw` (line 5) drive the same transition of `a` at once" in m for m in messages), messages
    after = _load(tmp_path, "  pulse mw area pi detuning 5 kHz\n  pulse ram area pi")
    assert not any("same transition" in w.message for w in after.warnings)
    other = _load(tmp_path, "  together {\n    pulse mw area pi\n    pulse ryd area pi\n  }")
    assert not any("same transition" in w.message for w in other.warnings), "qubit and Rydberg ladder differ"
