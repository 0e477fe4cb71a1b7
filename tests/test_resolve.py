"""The resolver: defaults, derived pulse timing, groups, blocks, imports, expectations."""
from __future__ import annotations

import hashlib
import math

import pytest

from conftest import BENCH_SITES, bench_program, write_program
from seqlang.compile import envelopes
from seqlang.lang.diagnostics import SeqlangError
from seqlang.program.model import PulseOp, RepeatOp, SerialOp, TogetherOp
from seqlang.program.resolve import resolve


def pulses(op) -> list[PulseOp]:
    """Every pulse of an operation tree, in source order."""
    if isinstance(op, PulseOp):
        return [op]
    if isinstance(op, (SerialOp, TogetherOp)):
        return [p for child in op.body for p in pulses(child)]
    if isinstance(op, RepeatOp):
        return pulses(op.body)
    return []


def resolved(tmp_path, body: str, tail: str = ""):
    program, _ = resolve(bench_program(tmp_path, body, tail))
    return program


def test_pulse_defaults(tmp_path):
    program = resolved(tmp_path, "  pulse mw_na area pi")
    (p,) = pulses(program.body)
    assert p.rabi_hz == 25e3, "without `rabi` a pulse runs at the drive's maximum"
    assert (p.detuning_hz, p.phase_rad, p.shape.kind) == (0.0, 0.0, "square")
    assert p.targets == ("a", "b"), "without `on` a pulse reaches every atom of its species"


def test_duration_derived_from_area(tmp_path):
    # Rabi formula (textbook): a resonant square pulse of area θ lasts θ/(2π f_Rabi).
    program = resolved(tmp_path, "  pulse mw_na area pi\n  pulse mw_na area pi/2 rabi 10 kHz")
    first, second = pulses(program.body)
    assert first.duration_s == pytest.approx(1 / (2 * 25e3), rel=1e-12)
    assert second.duration_s == pytest.approx(1 / (4 * 10e3), rel=1e-12)


def test_area_derived_from_duration(tmp_path):
    program = resolved(tmp_path, "  pulse mw_na duration 10 us rabi 12.5 kHz")
    (p,) = pulses(program.body)
    assert p.area_rad == pytest.approx(2 * math.pi * 12.5e3 * 10e-6, rel=1e-12)  # = π/2


def test_rabi_derived_from_area_and_duration(tmp_path):
    program = resolved(tmp_path, "  pulse ryd_cs on h area pi duration 1 us")
    (p,) = pulses(program.body)
    assert p.rabi_hz == pytest.approx(0.5e6, rel=1e-12)


def test_shaped_pulse_duration_keeps_the_area(tmp_path):
    program = resolved(tmp_path, "  pulse ryd_cs on h area pi shape blackman")
    (p,) = pulses(program.body)
    # Blackman window area 0.42·T (standard window definition): T = π/(2π·2 MHz·0.42).
    assert p.duration_s == pytest.approx(1 / (2 * 2e6 * 0.42), rel=1e-9)


def test_ramped_shape_defaults_to_the_drive_rise_time(tmp_path):
    program = resolved(tmp_path, "  pulse ryd_na area pi shape ramped")
    (p,) = pulses(program.body)
    assert p.shape.param("ramp", -1.0) == pytest.approx(20e-9)
    assert envelopes.pulse_area(p.shape, p.duration_s, p.rabi_hz) == pytest.approx(math.pi, rel=1e-9)


def test_sites_and_groups(tmp_path):
    tail = ""
    path = write_program(tmp_path, BENCH_SITES + "group cs_pair = h, g\ngroup both = cs_pair, a\n"
                         "sequence s {\n  pulse ryd_cs on cs_pair area pi\n}\n" + tail)
    program, _ = resolve(path)
    assert program.sites["b"].position_m == pytest.approx((4e-6, 0.0, 0.0))
    assert program.groups == {"cs_pair": ("h", "g"), "both": ("h", "g", "a")}
    assert pulses(program.body)[0].targets == ("h", "g")


def test_block_parameters_defaults_and_site_arguments(tmp_path):
    path = write_program(tmp_path, BENCH_SITES + """\
block hit(where, angle = pi, turn = 0 deg) {
  pulse ryd_cs on where area angle phase turn
}
sequence s {
  do hit(h)
  do hit(g, pi/2)
  do hit(g, turn = 90 deg)
}
""")
    program, _ = resolve(path)
    got = [(p.targets, p.area_rad, p.phase_rad) for p in pulses(program.body)]
    assert got == [(("h",), pytest.approx(math.pi), 0.0), (("g",), pytest.approx(math.pi / 2), 0.0),
                   (("g",), pytest.approx(math.pi), pytest.approx(math.pi / 2))]


def test_import_brings_blocks_and_constants(tmp_path):
    lib = "let gap = 2 us\nblock echo(phase_y = 90 deg) {\n  wait gap\n  pulse mw_na area pi phase phase_y\n}\n"
    path = write_program(tmp_path, BENCH_SITES.replace('use "bench.rig"', 'use "bench.rig"\nimport "lib/echo.seq"')
                         + "sequence s {\n  repeat 2 { do echo() }\n}\n", extra={"lib/echo.seq": lib})
    program, _ = resolve(path)
    (rep,) = program.body.body
    assert isinstance(rep, RepeatOp) and rep.count == 2
    wait = rep.body.body[0].body[0]
    assert wait.duration_s == pytest.approx(2e-6)
    assert pulses(program.body)[0].phase_rad == pytest.approx(math.pi / 2)
    # every file read is hashed for provenance (SHA-256, FIPS 180-4; hashlib as reference)
    for file, digest in program.sources.items():
        with open(file, "rb") as handle:
            assert digest == hashlib.sha256(handle.read()).hexdigest()
    assert len(program.sources) == 3


def test_lets_inside_the_sequence_shadow_nothing_outside(tmp_path):
    program = resolved(tmp_path, "  let t = 3 us\n  pulse mw_na duration t rabi 10 kHz")
    assert pulses(program.body)[0].duration_s == pytest.approx(3e-6)


def test_expectations(tmp_path):
    program = resolved(tmp_path, "  pulse mw_na area pi", "expect a, h as psi_plus\nexpect a, b, h as |101>\n")
    assert [(e.sites, e.state, e.is_ket) for e in program.expects] == [
        (("a", "h"), "psi_plus", False), (("a", "b", "h"), "101", True)]


def test_errors_are_collected_not_first_only(tmp_path):
    path = bench_program(tmp_path, "  pulse mw_nq area pi\n  wait 3 MHz\n  pulse ryd_cs on q area pi")
    with pytest.raises(SeqlangError) as info:
        resolve(path)
    found = sorted((d.span.line, d.message) for d in info.value.diagnostics)
    assert found == [(7, "unknown drive `mw_nq`"), (8, "expected a duration, got a frequency"),
                     (9, "unknown site `q`")]


def test_unit_names_are_refused_for_block_parameters(tmp_path):
    """`wait s` inside a block would silently mean one second if `s` could be a parameter."""
    path = write_program(tmp_path, BENCH_SITES + "block hold(s = 1 us) {\n  wait s\n}\n"
                         "sequence q {\n  do hold()\n}\n")
    with pytest.raises(SeqlangError) as info:
        resolve(path)
    assert [d.message for d in info.value.diagnostics] == ["`s` is a unit and cannot be a parameter's name"]
