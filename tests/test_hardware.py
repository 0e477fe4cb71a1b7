"""The hardware plan: latency compensation, reported shift, TTL gates with lead/lag, merging.

Bench rig (tests/conftest.py), tick 2 ns: mw_na latency 100 ns (50 ticks); ryd_na latency
400 ns (200 ticks), gate ttl.4 opened 100 ns (50 ticks) before and closed 40 ns (20 ticks)
after each pulse; image na latency 1 us (500 ticks); shutter latency 1 us (500 ticks).
"""
from __future__ import annotations

import pytest

from conftest import bench_program
from seqlang.compile.pipeline import check
from seqlang.emit.tables import timing_csv
from seqlang.show import compile_summary


def planned(tmp_path, body: str):
    return check(bench_program(tmp_path, body))


def entries(checked, port: str) -> list[tuple[int, int, str]]:
    return [(e.tick, e.ticks, e.kind) for e in checked.plan.ports[port]]


def test_event_is_issued_early_by_its_latency(tmp_path):
    checked = planned(tmp_path, "  wait 2 us\n  pulse mw_na area pi")
    assert checked.plan.shift_ticks == 0
    # physical start 1000 ticks, issued 50 ticks early; π at 25 kHz = 20 µs = 10 000 ticks
    assert entries(checked, "awg0.1") == [(950, 10000, "pulse")]


def test_issue_before_zero_shifts_everything_and_is_reported(tmp_path):
    checked = planned(tmp_path, "  pulse mw_na area pi")
    assert checked.plan.shift_ticks == 50
    assert checked.plan.shift_s == pytest.approx(100e-9)
    assert entries(checked, "awg0.1") == [(0, 10000, "pulse")]
    assert checked.quantized.events[0].start_s == pytest.approx(100e-9), "the atoms see it 100 ns in"
    assert "latency compensation shifted the sequence by 50 ticks (100 ns)" in compile_summary(checked)
    assert "shift_ticks=50" in timing_csv(checked).splitlines()[0]


def test_largest_latency_sets_the_shift(tmp_path):
    checked = planned(tmp_path, "  together {\n    switch shutter on\n    pulse ryd_na area pi\n  }")
    assert checked.plan.shift_ticks == 500
    assert entries(checked, "ttl.12") == [(0, 0, "switch")]
    # ryd_na: physical start 500, AWG issued 200 early, gate opened 50 early
    assert entries(checked, "awg1.1") == [(300, 250, "pulse")]
    assert entries(checked, "ttl.4") == [(450, 250 + 50 + 20, "gate")]


def test_gate_opens_before_and_closes_after_its_pulse(tmp_path):
    checked = planned(tmp_path, "  wait 1 us\n  pulse ryd_na area pi")
    assert checked.plan.shift_ticks == 0
    ((gate_tick, gate_ticks, _),) = entries(checked, "ttl.4")
    ((pulse_tick, pulse_ticks, _),) = entries(checked, "awg1.1")
    start = pulse_tick + 200  # physical start of the light
    assert gate_tick == start - 50
    assert gate_tick + gate_ticks == start + pulse_ticks + 20


def test_close_gate_windows_merge(tmp_path):
    # gap 30 ticks < lag + lead = 70 ticks: the gate stays open across both pulses
    checked = planned(tmp_path, "  wait 1 us\n  pulse ryd_na area pi\n  wait 60 ns\n  pulse ryd_na area pi")
    assert entries(checked, "awg1.1") == [(300, 250, "pulse"), (580, 250, "pulse")]
    assert entries(checked, "ttl.4") == [(450, 1050 - 450, "gate")]


def test_distant_gate_windows_stay_apart(tmp_path):
    checked = planned(tmp_path, "  wait 1 us\n  pulse ryd_na area pi\n  wait 1 us\n  pulse ryd_na area pi")
    assert entries(checked, "ttl.4") == [(450, 320, "gate"), (1200, 320, "gate")]


def test_imaging_and_port_actions(tmp_path):
    checked = planned(tmp_path, "  wait 2 us\n  image na -> shot\n  set coil -1.5 A")
    assert entries(checked, "ttl.8") == [(500, 5_000_000, "image")]
    (coil,) = checked.plan.ports["dac.3"]
    assert (coil.tick, coil.kind, coil.value) == (1000 + 5_000_000, "set", -1.5)


def test_rows_come_in_issue_order_with_sources(tmp_path):
    checked = planned(tmp_path, "  wait 1 us\n  pulse ryd_na area pi\n  pulse mw_na area pi")
    rows = checked.plan.rows()
    assert [r.tick for r in rows] == sorted(r.tick for r in rows)
    assert {r.source.rsplit(":", 1)[1] for r in rows if r.kind == "pulse"} == {"8", "9"}
