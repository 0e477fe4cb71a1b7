"""Every demo program in programs/ checks, compiles, and compiles reproducibly."""
from __future__ import annotations

import glob
import json
import math
import os
import subprocess
import sys

import pytest

import seqlang

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
DEMOS = sorted(glob.glob(os.path.join(ROOT, "programs", "*.seq")))


@pytest.mark.parametrize("path", DEMOS, ids=os.path.basename)
def test_demo_checks_without_errors(path):
    sequence = seqlang.load(path)
    assert sequence.timeline.events, "a demo program should do something"
    assert not [w for w in sequence.warnings if w.is_error]


@pytest.mark.parametrize("path", DEMOS, ids=os.path.basename)
def test_demo_compiles_to_identical_bytes_twice(path, tmp_path):
    first, second = tmp_path / "a", tmp_path / "b"
    point = ["--point", "0"] if seqlang.load(path).program.scans is not None else []  # a scan: one point
    for out in (first, second):
        run = subprocess.run([sys.executable, "-m", "seqlang", "compile", path, "-o", str(out), *point],
                             capture_output=True, text=True)
        assert run.returncode == 0, run.stderr
    for name in ("timing.csv", "timing.json", "waveforms.npz"):
        assert (first / name).read_bytes() == (second / name).read_bytes(), name


@pytest.mark.parametrize("path", DEMOS, ids=os.path.basename)
def test_played_pulse_areas_match_written_areas(path):
    """After tick rounding, each pulse keeps its area to within the DAC's resolution."""
    sequence = seqlang.load(path)
    written = {e.index: e.area_rad for e in sequence.timeline.pulses()}
    for event in sequence.played.pulses():
        drive = sequence.program.rig.drives[event.drive]
        # One amplitude step is max/(2^bits - 1); its effect on the area is at most
        # half a step relative to the full-scale amplitude (derived).
        bound = 0.5 / (2 ** drive.amplitude_bits - 1) * event.area_rad * drive.max_rabi_hz / event.rabi_hz
        assert abs(event.area_rad - written[event.index]) <= bound * 1.0001 + 1e-12


def test_bell_demo_json_has_timeline_fields(tmp_path):
    path = os.path.join(ROOT, "programs", "bell_pair.seq")
    seqlang.load(path).write_tables(str(tmp_path))
    document = json.loads((tmp_path / "timing.json").read_text())
    entry = document["timeline"][0]
    for key in ("start_ns", "duration_ns", "drive", "targets", "rabi_hz", "detuning_hz", "phase_rad", "shape"):
        assert key in entry
    assert set(document["provenance"]["sources"]) == {"bell_pair.seq", "millpond.rig"}
    # A square pi/2 microwave pulse at the drive's 22 kHz maximum lasts 1/(4 f) (Rabi formula,
    # textbook), rounded to the 2 ns tick and lengthened by at most one tick.
    assert math.isclose(entry["duration_ns"], 1e9 / (4 * 22e3), abs_tol=4.0)
