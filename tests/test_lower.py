"""Lowering to the timeline: serial order, `together` alignment, repetition, nesting."""
from __future__ import annotations

import pytest

from conftest import bench_program
from seqlang.compile.lower import lower
from seqlang.program.resolve import resolve


def timeline(tmp_path, body: str):
    program, _ = resolve(bench_program(tmp_path, body))
    return lower(program)


def starts_us(tl) -> list[tuple[int, float, float]]:
    """(source line, start µs, duration µs) of every event."""
    return [(e.span.line, round(e.start_s * 1e6, 9), round(e.duration_s * 1e6, 9)) for e in tl.events]


def test_statements_follow_one_another(tmp_path):
    tl = timeline(tmp_path, "  pulse mw_na area pi\n  wait 5 us\n  pulse mw_na area pi/2")
    # π at 25 kHz = 20 µs, π/2 = 10 µs (Rabi formula, textbook)
    assert starts_us(tl) == [(7, 0.0, 20.0), (9, 25.0, 10.0)]
    assert tl.duration_s == pytest.approx(35e-6)


@pytest.mark.parametrize("align, second_start", [("start", 0.0), ("end", 10.0), ("center", 5.0)])
def test_together_alignment(tmp_path, align, second_start):
    tl = timeline(tmp_path, f"  together align {align} {{\n    pulse mw_na area pi\n    pulse mw_cs duration 10 us\n  }}\n"
                            "  pulse ryd_cs on h area pi")
    by_line = {line: (start, length) for line, start, length in starts_us(tl)}
    assert by_line[8] == (0.0, 20.0)
    assert by_line[9] == (second_start, 10.0)
    assert by_line[11][0] == 20.0, "the next statement waits for the longest part"


def test_together_default_is_start(tmp_path):
    tl = timeline(tmp_path, "  together {\n    pulse mw_na area pi\n    pulse mw_cs duration 10 us\n  }")
    assert [e.start_s for e in tl.events] == [0.0, 0.0]


def test_repeat_places_copies_back_to_back(tmp_path):
    tl = timeline(tmp_path, "  repeat 3 {\n    pulse mw_na area pi\n    wait 5 us\n  }\n  pulse mw_cs duration 1 us")
    assert starts_us(tl) == [(8, 0.0, 20.0), (8, 25.0, 20.0), (8, 50.0, 20.0), (11, 75.0, 1.0)]
    assert [e.index for e in tl.events] == sorted({e.index for e in tl.events}), "indices are unique"


def test_nested_repeat_inside_together_end(tmp_path):
    body = """\
  together align end {
    repeat 2 {
      pulse mw_cs duration 4 us
      wait 1 us
    }
    pulse mw_na area pi/2
  }"""
    tl = timeline(tmp_path, body)
    # repeat lasts 10 µs, the π/2 pulse 10 µs as well: both start at 0 (order of equal
    # starts depends on float rounding of the sums, so compare as sets)
    assert sorted(starts_us(tl)) == [(9, 0.0, 4.0), (9, 5.0, 4.0), (12, 0.0, 10.0)]


def test_nested_together_in_repeat_centers_each_copy(tmp_path):
    body = """\
  repeat 2 {
    together align center {
      pulse mw_na area pi
      pulse mw_cs duration 4 us
    }
  }"""
    tl = timeline(tmp_path, body)
    assert starts_us(tl) == [(9, 0.0, 20.0), (10, 8.0, 4.0), (9, 20.0, 20.0), (10, 28.0, 4.0)]


def test_events_carry_drive_level_fields(tmp_path):
    tl = timeline(tmp_path, "  pulse ryd_cs on g area pi detuning 1 MHz phase 90 deg\n  image na -> shot\n"
                            "  set coil 0.5 A\n  switch shutter on")
    pulse, image, coil, shutter = tl.events
    assert (pulse.kind, pulse.drive, pulse.port, pulse.targets, pulse.species) == (
        "pulse", "ryd_cs", "awg1.2", ("g",), "cs")
    assert (pulse.rabi_hz, pulse.detuning_hz) == (2e6, 1e6)
    assert pulse.phase_rad == pytest.approx(1.5707963267948966)
    assert (image.kind, image.port, image.record, image.targets) == ("image", "ttl.8", "shot", ("a", "b"))
    assert image.start_s == pytest.approx(250e-9) and image.duration_s == pytest.approx(10e-3)
    assert (coil.kind, coil.port, coil.value) == ("set", "dac.3", 0.5)
    assert (shutter.kind, shutter.port, shutter.value) == ("switch", "ttl.12", 1.0)
    assert [e.span.line for e in tl.events] == [7, 8, 9, 10]
