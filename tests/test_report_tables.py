"""The CSV layout (empty cells that do not apply, times in ns), `show`'s labels, and notebook views."""
from __future__ import annotations

import csv
import io
from pathlib import Path

import numpy as np
import pytest

import seqlang
from seqlang.emit.tables import timing_csv
from seqlang.show import timeline_table

PROGRAMS = Path(__file__).resolve().parent.parent / "programs"


def _rows(name: str) -> tuple[seqlang.Sequence, list[dict]]:
    sequence = seqlang.load(str(PROGRAMS / f"{name}.seq"))
    text = "\n".join(line for line in timing_csv(sequence.checked).splitlines() if not line.startswith("#"))
    return sequence, list(csv.DictReader(io.StringIO(text)))


def test_gate_rows_leave_pulse_columns_empty():
    _, rows = _rows("bell_pair")
    gates = [r for r in rows if r["kind"] == "gate"]
    assert gates, "the Bell program gates its Rydberg lasers"
    for row in gates:
        assert row["drive"] in ("ryd_na", "ryd_cs")
        assert all(row[c] == "" for c in ("rabi_hz", "amplitude", "detuning_hz", "phase_rad", "shape", "targets",
                                          "value"))
    pulses = [r for r in rows if r["kind"] == "pulse"]
    assert all(r["rabi_hz"] and r["phase_rad"] and r["value"] == "" for r in pulses)


def test_level_rows_fill_only_their_value():
    _, rows = _rows("hold_and_image")
    by_kind = {r["kind"]: r for r in rows}
    assert by_kind["set"]["value"] == "0.5" and by_kind["switch"]["value"] == "1"
    assert by_kind["set"]["rabi_hz"] == ""
    assert sorted(r["targets"] for r in rows if r["kind"] == "image") == ["c", "d"]
    assert by_kind["image"]["rabi_hz"] == "" and by_kind["trigger"]["value"] == ""


def test_time_columns_are_ticks_times_the_tick():
    sequence, rows = _rows("hold_and_image")
    tick_ns = sequence.checked.plan.tick_s * 1e9
    for row in rows:
        assert float(row["time_ns"]) == pytest.approx(int(row["tick"]) * tick_ns, abs=1e-6)
        assert float(row["duration_ns"]) == pytest.approx(int(row["ticks"]) * tick_ns, abs=1e-6)


def test_show_writes_micro_and_says_phase_is_in_rad():
    sequence = seqlang.load(str(PROGRAMS / "bell_pair.seq"))
    table = timeline_table(sequence.checked)
    assert "phase/rad" in table.splitlines()[0]
    assert "11.364 µs" in table and " us " not in table
    assert "0.50000π" in table


# ---- notebook views -------------------------------------------------------------------
@pytest.fixture(scope="module")
def result():
    return seqlang.simulate(str(PROGRAMS / "bell_pair.seq"), history=True)


def test_result_shows_a_table_in_jupyter(result):
    html = result._repr_html_()
    e = result.expectations[0]
    assert "<table>" in html and f"{e['fidelity']:.5g}" in html and "psi_plus" in html
    assert "<svg" in html, "the correlator figure"


def test_sequence_shows_its_compile_report_in_jupyter():
    html = seqlang.load(str(PROGRAMS / "bell_pair.seq"))._repr_html_()
    assert "latency compensation shifted the sequence by 40 ticks" in html and "<svg" in html


def test_result_to_xarray_holds_the_same_numbers(result):
    data = result.to_xarray()
    e = result.expectations[0]
    label = "d,h as psi_plus"
    assert float(data["fidelity"].sel(expectation=label)) == e["fidelity"]
    assert float(data["correlators"].sel(expectation=label, pauli="ZZ")) == e["correlators"]["ZZ"]
    final = data["site_populations"].sel(site="d").values
    assert final.sum() == pytest.approx(1.0)
    history = data["history"]
    assert history.dims == ("time_s", "site", "level")
    np.testing.assert_allclose(history.isel(time_s=-1).values, data["site_populations"].values, atol=1e-9)
    assert data.attrs["noise"] == "off" and data.attrs["program"] == "bell"


def test_to_dataframe_when_pandas_is_there(result):
    pytest.importorskip("pandas")
    frame = result.to_dataframe()
    assert list(frame["state"]) == ["psi_plus"] and frame["fidelity"][0] == result.expectations[0]["fidelity"]
    timeline = seqlang.load(str(PROGRAMS / "bell_pair.seq")).to_dataframe()
    assert list(timeline["drive"]) == ["mw_na", "mw_cs", "ryd_cs", "ryd_na", "ryd_cs", "mw_na"]
    assert timeline["start_ns"][2] == 13970
