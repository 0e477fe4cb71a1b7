"""The trap switch: a digital port declared `role traps`, and the warning for Rydberg pulses in trap light."""
from __future__ import annotations

import pytest

from seqlang.compile.pipeline import check
from seqlang.lang.diagnostics import SeqlangError

RIG = """rig trapbench {
  tick 2 ns
  species a = Rb87 { rydberg 70S1/2  %(shift)s }
  drive mw_a microwave a { rabi 2 MHz  port awg0.1 }
  drive ryd_a rydberg a { rabi 5 MHz  port awg1.1 }
  port tweezers = ttl.3 { kind %(kind)s  role traps }
}
"""
SEQ = """use "t.rig"
site q = a at (0, 0) um
sequence t {
  pulse mw_a area pi
  pulse ryd_a area pi
  switch tweezers off
  wait 1 us
  pulse ryd_a area pi
  switch tweezers on
  pulse ryd_a area pi
}
"""


def _check(tmp_path, shift="trap_rydberg_shift 1.2 MHz", kind="digital"):
    (tmp_path / "t.rig").write_text(RIG % {"shift": shift, "kind": kind})
    (tmp_path / "t.seq").write_text(SEQ)
    return check(str(tmp_path / "t.seq"))


def _trap_warnings(checked):
    return [d for d in checked.warnings if "traps on" in d.message]


def test_rydberg_pulses_in_trap_light_are_warned_where_they_are(tmp_path):
    warned = _trap_warnings(_check(tmp_path))
    assert [w.span.line for w in warned] == [5, 10]  # before the switch-off and after the switch-on
    assert all("1.2 MHz" in w.message and w.hint for w in warned)


def test_no_warning_without_a_declared_shift(tmp_path):
    assert _trap_warnings(_check(tmp_path, shift="")) == []


def test_trap_switch_must_be_digital(tmp_path):
    with pytest.raises(SeqlangError) as raised:
        _check(tmp_path, kind="analog")
    assert any("trap switch must be a digital port" in d.message for d in raised.value.diagnostics)
