"""Emitters: golden files for the timeline and each table, reproducibility, waveform samples.

Golden inputs are frozen copies in tests/golden/inputs/ (two demo programs and a program
with every envelope), so that edits to programs/ do not move the goldens. Rewrite with
SEQLANG_UPDATE_GOLDEN=1 and review the diff.
"""
from __future__ import annotations

import hashlib
import io
import json
import math

import numpy as np
import pytest
from scipy import integrate

from conftest import GOLDEN, check_golden
from seqlang import cli
from seqlang.api import load

INPUTS = GOLDEN / "inputs"
PROGRAMS = ["bell_pair", "rabi_ramsey", "shaped"]


@pytest.fixture(scope="module")
def compiled(tmp_path_factory):
    """Each golden program compiled twice, into two different directories."""
    out = {}
    for name in PROGRAMS:
        dirs = [tmp_path_factory.mktemp(f"{name}_{run}") for run in "ab"]
        sequence = load(str(INPUTS / f"{name}.seq"))
        for directory in dirs:
            sequence.write_tables(str(directory))
        out[name] = (sequence, dirs)
    return out


@pytest.mark.parametrize("name", PROGRAMS)
def test_timeline_table_matches_golden(name, capsys):
    assert cli.main(["show", "--no-pairs", str(INPUTS / f"{name}.seq")]) == 0
    check_golden(f"{name}.show.txt", capsys.readouterr().out)


@pytest.mark.parametrize("table", ["timing.csv", "timing.json"])
@pytest.mark.parametrize("name", PROGRAMS)
def test_tables_match_golden(compiled, name, table):
    _, (first, _) = compiled[name]
    check_golden(f"{name}.{table}", (first / table).read_text(encoding="utf-8"))


@pytest.mark.parametrize("name", PROGRAMS)
def test_two_runs_give_identical_bytes(compiled, name):
    _, (first, second) = compiled[name]
    for table in ("timing.csv", "timing.json", "waveforms.npz"):
        a, b = (first / table).read_bytes(), (second / table).read_bytes()
        assert hashlib.sha256(a).hexdigest() == hashlib.sha256(b).hexdigest(), table


def _json(compiled, name) -> dict:
    return json.loads((compiled[name][1][0] / "timing.json").read_text())


def test_bell_pair_numbers_by_hand(compiled):
    doc = _json(compiled, "bell_pair")
    # the microwave horns have 80 ns latency = 40 ticks of 2 ns; pulses at t = 0 shift everything
    assert (doc["shift_ticks"], doc["shift_ns"]) == (40, 80)
    mw_na = doc["ports"]["awg0.1"][0]
    # π/2 at 22 kHz: 1/(4·22 kHz) = 11.3636 µs = 5681.8 ticks -> 5682 (Rabi formula, textbook)
    assert (mw_na["tick"], mw_na["ticks"]) == (0, round(1 / (4 * 22e3) / 2e-9))
    ryd_cs = doc["ports"]["awg1.2"][0]
    # π at 1 MHz lasts 500 ns = 250 ticks; issued 380 ns (190 ticks) before it plays
    assert ryd_cs["ticks"] == 250
    start_ticks = doc["timeline"][2]["start_ns"] / 2
    assert ryd_cs["tick"] == start_ticks - 190
    gate = doc["ports"]["ttl.5"]
    assert gate[0]["tick"] == start_ticks - 60 and gate[0]["ticks"] == 250 + 60 + 20  # lead 120 ns, lag 40 ns


def test_rabi_ramsey_numbers_by_hand(compiled):
    doc = _json(compiled, "rabi_ramsey")
    timeline = doc["timeline"]
    # π/2 at the 18 kHz maximum: 1/(4·18 kHz) = 13.8889 µs = 6944.4 ticks: 6944 ticks would need
    # more than 18 kHz, so it plays 6945 ticks at 18 kHz·6944.4/6945
    assert timeline[1]["duration_ns"] == 6945 * 2
    assert timeline[1]["rabi_hz"] == pytest.approx(18e3 * (1e9 / (4 * 18e3)) / (6945 * 2), abs=18e3 / 65535)
    # the Ramsey wait of 250 µs sits between the end of one π/2 pulse and the start of the next
    gap = timeline[2]["start_ns"] - (timeline[1]["start_ns"] + timeline[1]["duration_ns"])
    assert gap == pytest.approx(250e3, abs=2)
    assert doc["report"]["pulses_stretched_one_tick"] >= 1


def test_provenance_hashes_the_sources(compiled):
    doc = _json(compiled, "bell_pair")
    sources = doc["provenance"]["sources"]
    assert set(sources) == {"bell_pair.seq", "millpond.rig"}
    for relative, digest in sources.items():
        assert digest == hashlib.sha256((INPUTS / relative).read_bytes()).hexdigest()
    assert doc["provenance"]["tick_ns"] == 2


def test_csv_rows_name_their_source_lines(compiled):
    text = (compiled["bell_pair"][1][0] / "timing.csv").read_text()
    header, *rows = [line.split(",") for line in text.splitlines()[2:]]
    source_lines = (INPUTS / "bell_pair.seq").read_text().splitlines()
    for row in rows:
        file, line = row[-1].rsplit(":", 1)
        assert file == "bell_pair.seq"
        statement = source_lines[int(line) - 1].split()
        drive = row[header.index("drive")]
        assert statement[0] == "pulse" and statement[1] == drive, "the row's drive is on its source line"


def _envelope(kind: str, t: np.ndarray, duration: float, sigma: float | None = None, ramp: float = 0.0):
    """Independent envelope formulas (standard definitions, common practice)."""
    if kind == "gaussian":
        sigma = sigma or duration / 4
        return np.exp(-((t - duration / 2) ** 2) / (2 * sigma**2))
    if kind == "blackman":
        x = 2 * np.pi * t / duration
        return 0.42 - 0.5 * np.cos(x) + 0.08 * np.cos(2 * x)
    up, down = np.clip(t / ramp, 0, 1), np.clip((duration - t) / ramp, 0, 1)
    return np.sin(np.pi / 2 * np.minimum(up, down)) ** 2


def test_waveform_samples_match_the_envelopes(compiled):
    sequence, (first, _) = compiled["shaped"]
    arrays = np.load(io.BytesIO((first / "waveforms.npz").read_bytes()))
    events = sequence.played.pulses()
    params = {0: {}, 1: {}, 2: {"ramp": 50e-9}, 3: {"sigma": 60e-9}}
    assert sorted(arrays.files) == sorted(f"event{i}_{k}" for i in range(4) for k in ("t_ns", "rabi_hz", "phase_rad"))
    for event in events:
        t = arrays[f"event{event.index}_t_ns"] * 1e-9
        rabi = arrays[f"event{event.index}_rabi_hz"]
        # 500 MHz sample rate: one sample every 2 ns, both ends included
        assert len(t) == round(event.duration_s * 500e6) + 1
        expected = event.rabi_hz * _envelope(event.shape.kind, t, event.duration_s, **params[event.index])
        assert rabi == pytest.approx(expected, rel=1e-12, abs=1e-9)
        assert np.all(arrays[f"event{event.index}_phase_rad"] == event.phase_rad)
        # the sampled waveform's area (Simpson's rule, scipy) is the played pulse area
        area = 2 * math.pi * integrate.simpson(rabi, x=t)
        assert area == pytest.approx(event.area_rad, rel=1e-4)


def test_blackman_pi_pulse_duration(compiled):
    """Blackman area 0.42·T (standard window definition): π at 1 MHz lasts 1/(2·0.42·1 MHz)."""
    sequence, _ = compiled["shaped"]
    blackman = sequence.timeline.pulses()[1]
    assert blackman.duration_s == pytest.approx(1 / (2 * 0.42 * 1e6), rel=1e-9)
    played = sequence.played.pulses()[1]
    assert abs(played.duration_s - blackman.duration_s) <= 2e-9


def test_golden_inputs_are_untouched_copies_of_valid_programs():
    for name in PROGRAMS:
        assert load(str(INPUTS / f"{name}.seq")).timeline.events
