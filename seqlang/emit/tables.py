"""timing.csv and timing.json (formats in docs/output-formats.md).

Both are deterministic: fixed key order, fixed float formatting, paths
relative to the sequence file's directory, no timestamps.
"""
from __future__ import annotations

import csv
import io
import json
import math
import os

from .. import __version__
from ..compile.pipeline import Checked
from ..compile.timeline import Event
from ..lang.diagnostics import SeqlangError, error

FORMAT = "seqlang-timing/1"
CAUTION = ("These tables drive lasers, RF amplifiers and electrodes. Review them before they drive "
           "hardware; seqlang's limits are no substitute for hardware interlocks; laser, RF and "
           "high-voltage safety follow local rules and the lab's licensed safety officer.")
CSV_COLUMNS = ("port", "tick", "time_ns", "ticks", "duration_ns", "kind", "drive", "rabi_hz", "amplitude",
               "detuning_hz", "phase_rad", "shape", "targets", "value", "event", "source")
# Which optional columns a row kind fills; the others stay empty (a gate has no Rabi frequency).
_FILLED = {"pulse": {"drive", "rabi_hz", "amplitude", "detuning_hz", "phase_rad", "shape", "targets"},
           "gate": {"drive"}, "image": {"targets"}, "set": {"value"}, "switch": {"value"}}


def _num(x: float) -> float | int:
    """Stable float formatting: 12 significant digits, integers stay integers."""
    if not math.isfinite(x):
        raise ValueError(f"refusing to write the non-finite number {x}")
    if float(x).is_integer() and abs(x) < 2**53:
        return int(x)
    return float(f"{x:.12g}")


def _relative(checked: Checked, path: str) -> str:
    base = os.path.dirname(os.path.abspath(checked.program.path))
    return os.path.relpath(os.path.abspath(path), base).replace(os.sep, "/")


def _source(checked: Checked, source: str) -> str:
    path, line = source.rsplit(":", 1)
    return f"{_relative(checked, path)}:{line}"


_ROW_NUMBERS = ("rabi_hz", "amplitude", "detuning_hz", "phase_rad", "value")
_EVENT_NUMBERS = ("start_s", "duration_s", "rabi_hz", "detuning_hz", "phase_rad", "area_rad", "value")


def refuse_non_finite(checked: Checked) -> None:
    """Last line of defence: a NaN or infinity never reaches a table (the checks should stop it first)."""
    spans = {e.index: e.span for e in checked.quantized.events}
    for event in checked.quantized.events:
        _refuse([getattr(event, name) for name in _EVENT_NUMBERS] + [v for _, v in event.shape.params],
                event.span)
    for row in checked.plan.rows():
        _refuse([getattr(row, name) for name in _ROW_NUMBERS], spans.get(row.event))


def _refuse(values: list[float], span) -> None:
    bad = [v for v in values if not math.isfinite(v)]
    if bad and span is not None:
        raise SeqlangError([error(f"refusing to write the non-finite value {bad[0]} into the timing tables "
                                  "(this is a bug in seqlang's checks; please report it)", span)])
    if bad:
        raise ValueError(f"refusing to write the non-finite value {bad[0]}")


def timing_csv(checked: Checked) -> str:
    """One row per port event, in issue order, with the source line that made it."""
    refuse_non_finite(checked)
    out = io.StringIO()
    out.write(f"# seqlang {__version__} timing table ({FORMAT}); tick_ns={_num(checked.plan.tick_s * 1e9)}; "
              f"shift_ticks={checked.plan.shift_ticks}\n")
    out.write(f"# CAUTION: {CAUTION}\n")
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    tick_ns = checked.plan.tick_s * 1e9
    for e in checked.plan.rows():
        writer.writerow(_csv_row(checked, e, tick_ns))
    return out.getvalue()


def _csv_row(checked: Checked, e, tick_ns: float) -> list:
    """One CSV row; columns that do not apply to the row's kind are left empty."""
    filled = _FILLED.get(e.kind, set())
    optional = {"drive": e.drive, "rabi_hz": _num(e.rabi_hz), "amplitude": _num(e.amplitude),
                "detuning_hz": _num(e.detuning_hz), "phase_rad": _num(e.phase_rad), "shape": e.shape,
                "targets": " ".join(e.targets), "value": _num(e.value)}
    row = {"port": e.port, "tick": e.tick, "time_ns": _num(e.tick * tick_ns), "ticks": e.ticks,
           "duration_ns": _num(e.ticks * tick_ns), "kind": e.kind, "event": e.event,
           "source": _source(checked, e.source)}
    row.update({k: (v if k in filled else "") for k, v in optional.items()})
    return [row[c] for c in CSV_COLUMNS]


def _port_entry(checked: Checked, e) -> dict:
    entry = {"tick": e.tick, "ticks": e.ticks, "kind": e.kind, "event": e.event,
             "source": _source(checked, e.source)}
    if e.kind == "pulse":
        entry.update(drive=e.drive, rabi_hz=_num(e.rabi_hz), amplitude=_num(e.amplitude),
                     detuning_hz=_num(e.detuning_hz), phase_rad=_num(e.phase_rad), shape=e.shape,
                     targets=list(e.targets))
    elif e.kind == "gate":
        entry.update(drive=e.drive)
    elif e.kind in ("set", "switch"):
        entry.update(value=_num(e.value))
    elif e.kind == "ramp":
        entry.update(start_hz=_num(e.ramp[0]), end_hz=_num(e.ramp[1]), profile=e.ramp[2],
                     targets=list(e.targets), samples=f"ramp{e.event}_{e.port}")
    return entry


def timeline_entry(checked: Checked, e: Event) -> dict:
    """One drive-level event in physical units (nanoseconds, Hz, rad)."""
    return {
        "index": e.index, "kind": e.kind, "start_ns": _num(e.start_s * 1e9),
        "duration_ns": _num(e.duration_s * 1e9), "drive": e.drive, "port": e.port,
        "targets": list(e.targets), "species": e.species, "rabi_hz": _num(e.rabi_hz),
        "detuning_hz": _num(e.detuning_hz), "phase_rad": _num(e.phase_rad), "area_rad": _num(e.area_rad),
        "shape": e.shape.kind, "shape_params": {k: _num(v) for k, v in e.shape.params},
        "record": e.record, "value": _num(e.value),
        "source": f"{_relative(checked, e.span.file)}:{e.span.line}",
    }


def provenance(checked: Checked) -> dict:
    """Tool version, SHA-256 of every source file, tick."""
    return {
        "tool": "seqlang", "version": __version__, "format": FORMAT,
        "sequence": _relative(checked, checked.program.path),
        "sources": {_relative(checked, p): h for p, h in sorted(checked.program.sources.items())},
        "rig": _relative(checked, checked.program.rig.path), "tick_ns": _num(checked.plan.tick_s * 1e9),
        **_scan_point(checked.program), **_occupancy(checked.program),
    }


def _occupancy(program) -> dict:
    """The load seed (or the occupancy file) of a program whose traps load with a probability."""
    state = getattr(program, "arrays", None)
    if state is None:
        return {}
    if state.occupancy.given is not None:
        return {"occupancy": os.path.basename(state.occupancy.source or "")}
    return {"load_seed": state.occupancy.seed}


def _scan_point(program) -> dict:
    """For one point of a scan: its index and the scanned values (in the units written)."""
    space = getattr(program, "scans", None)
    if space is None:
        return {}
    values = {a.name: _num(a.shown(program.point[a.name])) for a in space.axes}
    return {"scan_point": {"index": program.point_index, "values": values,
                           "units": {a.name: a.unit for a in space.axes}}}


def timing_json(checked: Checked) -> str:
    """Per-port event lists, the drive-level timeline, the compile report and provenance."""
    refuse_non_finite(checked)
    plan, report = checked.plan, checked.plan.report
    document = {
        "caution": CAUTION,
        "provenance": provenance(checked),
        "tick_ns": _num(plan.tick_s * 1e9),
        "shift_ticks": plan.shift_ticks,
        "shift_ns": _num(plan.shift_s * 1e9),
        "duration_ns": _num(checked.quantized.duration_s * 1e9),
        "latency_ticks": dict(sorted(plan.latency_ticks.items())),
        # Part of each latency that whole ticks do not compensate: events happen this much late.
        "latency_remainder_ns": {port: _num(r * 1e9) for port, r in sorted(plan.latency_remainder_s.items())},
        "report": {
            "max_area_error_rad": _num(report.max_area_error_rad),
            "max_timing_error_ns": _num(report.max_timing_error_s * 1e9),
            "pulses_stretched_one_tick": report.stretched,
            "max_stretch_shift_ns": _num(report.max_stretch_shift_s * 1e9),
            "hold_rows": plan.holds,
            "area_error_rad": {str(i): _num(err) for i, err in report.area_errors_rad},
            "max_detuning_change_hz": _num(report.max_detuning_change_hz),
            "detuning_change_hz": {str(i): _num(d) for i, d in report.detuning_changes_hz},
        },
        "ports": {port: [_port_entry(checked, e) for e in events] for port, events in plan.ports.items()},
        "timeline": [timeline_entry(checked, e) for e in checked.quantized.events],
    }
    if checked.program.arrays is not None:  # loading and rearrangement (emit/arrays.py)
        from .arrays import array_document
        document["arrays"] = array_document(checked.program.arrays)
    if checked.quantized.conditioned():  # feed-forward: the branch table (emit/branches.py)
        from .branches import branch_rows
        document["branches"] = branch_rows(checked)
    return json.dumps(document, indent=1, sort_keys=False, ensure_ascii=False, allow_nan=False) + "\n"
