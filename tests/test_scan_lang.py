"""Scan declarations: points, units, where a scanned name may stand, per-point checking."""
from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest

import seqlang
from seqlang.lang.diagnostics import SeqlangError
from seqlang.lang.parser import parse_text
from seqlang.program.scans import resolve_scans
from tests.conftest import ROOT, bench_program, write_program


def _space(text: str):
    diags = []
    space = resolve_scans(parse_text(text, "x.seq"), diags)
    assert not diags, diags
    return space


def test_linear_range_includes_both_ends():
    space = _space("scan t = 0 us .. 2 us points 5")
    assert space.axes[0].values == pytest.approx([0, 0.5e-6, 1e-6, 1.5e-6, 2e-6], abs=1e-18)
    assert space.axes[0].unit == "us" and space.shape == (5,)


def test_log_range_is_geometric():
    space = _space("scan d = 2 um .. 20 um points 3 spacing log")
    assert space.axes[0].values == pytest.approx([2e-6, math.sqrt(40) * 1e-6, 20e-6])


def test_list_keeps_the_written_values_and_units():
    space = _space("scan phi = [0 deg, 90 deg, 180 deg]")
    assert space.axes[0].values == pytest.approx([0, math.pi / 2, math.pi])
    assert space.label(space.point(1)) == "phi = 90 deg"


def test_scans_combine_as_an_outer_product_first_declared_slowest():
    space = _space("scan a = [1, 2]\nscan b = [10 Hz, 20 Hz, 30 Hz]")
    assert space.shape == (2, 3) and space.count == 6
    assert [space.point(i) for i in (0, 1, 3)] == [{"a": 1, "b": 10}, {"a": 1, "b": 20}, {"a": 2, "b": 10}]


def test_lockstep_scans_share_one_dimension():
    space = _space("scan a = [1, 2, 3]\nscan c = [5, 6]\nscan b = [10, 20, 30]\nscan lockstep a, b")
    assert space.shape == (3, 2)
    assert space.point(5) == {"a": 3, "b": 30, "c": 6}


def test_scanned_name_stands_wherever_a_constant_does(tmp_path):
    path = bench_program(tmp_path, """
  pulse mw_na area ar detuning det phase ph
  pulse ryd_cs on h duration tau
""", "")
    text = open(path).read().replace('use "bench.rig"', 'use "bench.rig"\nscan ar = [pi/2, pi]\n'
                                     'scan det = [0 kHz, 20 kHz]\nscan ph = [0 deg, 45 deg]\n'
                                     'scan tau = [100 ns, 300 ns]\nscan x = [4 um, 6 um]')
    text = text.replace("site b = na at (4, 0) um", "site b = na at (x, 0 um)")
    open(path, "w").write(text)
    seq = seqlang.load(path, point=31)  # the last point: every scan at its second value
    first, second = seq.timeline.events[:2]
    assert first.area_rad == pytest.approx(math.pi)
    assert first.detuning_hz == pytest.approx(20e3) and first.phase_rad == pytest.approx(math.pi / 4)
    assert second.duration_s == pytest.approx(300e-9)
    assert seq.program.sites["b"].position_m[0] == pytest.approx(6e-6)


def test_scan_overrides_a_rig_let_and_a_drive_property(tmp_path):
    from tests.conftest import BENCH_RIG
    rig_text = BENCH_RIG.replace("rig bench {", "rig bench {\n  let w = 20 kHz").replace(
        "drive mw_cs microwave cs { rabi 20 kHz", "drive mw_cs microwave cs { rabi w")
    path = write_program(tmp_path, 'use "bench.rig"\nsite h = cs at (0, 0) um\n'
                         "scan w = [10 kHz, 15 kHz]\nscan ryd_cs.rabi = [1 MHz, 1.5 MHz]\n"
                         "sequence s {\n  pulse mw_cs area pi\n  pulse ryd_cs on h area pi\n}\n", rig_text)
    seq = seqlang.load(path, point=3)
    assert seq.program.rig.drives["mw_cs"].max_rabi_hz == pytest.approx(15e3)
    assert seq.program.rig.drives["ryd_cs"].max_rabi_hz == pytest.approx(1.5e6)
    assert seq.timeline.events[0].duration_s == pytest.approx(1 / (2 * 15e3))


def test_rig_value_override_is_checked_like_the_rig_value(tmp_path):
    path = write_program(tmp_path, 'use "bench.rig"\nsite h = cs at (0, 0) um\nscan mw_cs.rabi = [10 us]\n'
                         "sequence s {\n  pulse mw_cs area pi\n}\n")
    with pytest.raises(SeqlangError) as info:
        seqlang.load(path)
    assert any("expected a frequency" in d.message for d in info.value.diagnostics)


def _cli(*args, cwd=ROOT):
    return subprocess.run([sys.executable, "-m", "seqlang", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=120)


def test_check_reports_every_point_and_names_it(tmp_path):
    path = bench_program(tmp_path, "  pulse mw_na duration t detuning d", "")
    text = open(path).read().replace('use "bench.rig"', 'use "bench.rig"\nscan t = [1 us, 0 us]\n'
                                     "scan d = [0 kHz, 50 kHz, 150 kHz]")
    open(path, "w").write(text)
    result = _cli("check", path)
    assert result.returncode == 1
    assert "at t = 0 us, d = 0 kHz: the duration must be positive (and 2 more points)" in result.stderr
    assert "at t = 1 us, d = 150 kHz: detuning 150 kHz is outside" in result.stderr
    assert "Traceback" not in result.stderr


def test_check_of_a_good_scan_counts_its_points():
    result = _cli("check", "programs/scan_microwave_resonance.seq")
    assert result.returncode == 0, result.stderr
    assert "49 scan points checked" in result.stdout


def test_compile_of_a_scan_file_needs_a_point(tmp_path):
    result = _cli("compile", "programs/scan_microwave_resonance.seq", "-o", str(tmp_path))
    assert result.returncode == 2 and "--point K" in result.stderr
    result = _cli("compile", "programs/scan_microwave_resonance.seq", "-o", str(tmp_path), "--point", "49")
    assert result.returncode == 2 and "outside" in result.stderr


def test_one_point_compiles_as_the_same_file_with_a_let(tmp_path):
    """The scan point's tables equal those of the file with `let delta = <value>` in place of the scan."""
    source = (ROOT / "programs/scan_microwave_resonance.seq").read_text()
    texts = {"scan": source, "alone": source.replace("scan delta = -60 kHz .. 60 kHz points 49", "let delta = 40 kHz")}
    for name, text in texts.items():  # one file name in two directories: the tables quote it
        (tmp_path / name).mkdir()
        (tmp_path / name / "resonance.seq").write_text(text)
        (tmp_path / name / "millpond.rig").write_text((ROOT / "programs/millpond.rig").read_text())
    assert _cli("compile", "resonance.seq", "--point", "40", "-o", "out", cwd=tmp_path / "scan").returncode == 0
    assert _cli("compile", "resonance.seq", "-o", "out", cwd=tmp_path / "alone").returncode == 0
    scan, alone = tmp_path / "scan/out", tmp_path / "alone/out"
    assert (scan / "timing.csv").read_bytes() == (alone / "timing.csv").read_bytes()
    assert (scan / "waveforms.npz").read_bytes() == (alone / "waveforms.npz").read_bytes()
    point, single = (json.loads((d / "timing.json").read_text()) for d in (scan, alone))
    assert point["provenance"].pop("scan_point") == {"index": 40, "values": {"delta": 40}, "units": {"delta": "kHz"}}
    assert point["ports"] == single["ports"] and point["timeline"] == single["timeline"]


def test_scan_values_must_be_constants():
    diags = []
    resolve_scans(parse_text("let a = 1 us\nscan t = [a]", "x.seq"), diags)
    assert diags and "numbers and units only" in diags[0].message


def test_scanned_name_in_wait_repeat_and_block_bodies(tmp_path):
    path = bench_program(tmp_path, "  repeat n { do flip(pi) }", "")
    text = open(path).read().replace('use "bench.rig"', 'use "bench.rig"\nscan t = [1 us, 2 us]\nscan n = [1, 3]\n'
                                     "block flip(x) {\n  pulse mw_cs area x\n  wait t\n}")
    open(path, "w").write(text)
    one, three = seqlang.load(path, point=2), seqlang.load(path, point=3)  # t = 2 us; n = 1 and 3
    assert len(one.timeline.events) == 1 and len(three.timeline.events) == 3
    pulse = one.timeline.events[0].duration_s
    assert one.timeline.duration_s == pytest.approx(pulse + 2e-6)
    assert three.timeline.duration_s == pytest.approx(3 * (pulse + 2e-6))


def test_a_scanned_rig_value_points_at_its_key():
    """The property a scan puts in place of `mw_cs.rabi` has its key span on `rabi` of the scan line."""
    from seqlang.lang import syntax as ast
    from seqlang.lang.parser import parse_text
    from seqlang.program.scans import ScanAxis, _with_prop
    text = "scan mw_cs.rabi = [10 kHz, 20 kHz]\n"
    decl = parse_text(text, "s.seq").items[0]
    axis = ScanAxis("mw_cs.rabi", (1e4, 2e4), (0, 0, -1, 0, 0), "kHz", decl.span, "listed", decl.target.span)
    owner = ast.DriveDecl(ast.Ident("mw_cs", decl.span), ast.Ident("microwave", decl.span),
                          ast.Ident("cs", decl.span), (), decl.span)
    (prop,) = _with_prop(owner, "rabi", axis).props
    assert text[prop.key.span.start:prop.key.span.end] == "rabi" and prop.key.span.column == 12
