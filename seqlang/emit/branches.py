"""The branch table: what each conditioned event plays for each key of its record.

The port tables hold one fixed timeline; the branch table tells the sequencer,
per conditioned event, which record and sites to count, and per key (outcome
bit, or bright count 0..N) whether the event plays and with which amplitude,
detuning and phase — after tick and amplitude rounding — plus the tick by which
the key must be known. Format in docs/output-formats.md.
"""
from __future__ import annotations

import csv
import io

from .. import __version__
from ..compile.decisions import RecordWriters, ready_time, variant_of
from ..compile.hardware import played_detuning
from ..compile.pipeline import Checked
from ..compile.timeline import PULSE
from .tables import CAUTION, _num, _source

COLUMNS = ("event", "kind", "drive", "port", "record", "sites", "key_kind", "key", "enabled", "rabi_hz",
           "amplitude", "detuning_hz", "phase_rad", "area_rad", "ready_tick", "deadline_tick", "source")


def branch_rows(checked: Checked) -> list[dict]:
    """One row per conditioned event and key, in event order."""
    plan, program = checked.plan, checked.program
    issue: dict[int, int] = {}
    for entry in plan.rows():
        issue[entry.event] = min(issue.get(entry.event, entry.tick), entry.tick)
    rows, writers = [], RecordWriters(plan.timeline)  # one index of the imagings, not a scan per event
    for event in plan.timeline.conditioned():
        selection = event.decision.selection
        image = writers.of(event)
        ready = round(ready_time(program, image) / plan.tick_s) if image is not None else 0
        for key in selection.keys:
            variant = variant_of(event, key)
            played = variant is not None
            drive = program.rig.drives[event.drive] if event.kind == PULSE else None
            rows.append({
                "event": event.index, "kind": event.kind, "drive": event.drive or "", "port": event.port,
                "record": selection.record, "sites": " ".join(selection.sites),
                "key_kind": "outcome" if len(selection.sites) == 1 else "bright_count", "key": key,
                "enabled": int(played),
                "rabi_hz": _num(variant.rabi_hz) if played and drive else 0,
                "amplitude": _num(variant.rabi_hz / drive.max_rabi_hz) if played and drive else 0,
                "detuning_hz": _num(played_detuning(drive, variant.detuning_hz)) if played and drive else 0,
                "phase_rad": _num(variant.phase_rad) if played and drive else 0,
                "area_rad": _num(variant.area_rad) if played and drive else 0,
                "ready_tick": ready, "deadline_tick": issue.get(event.index, 0),
                "source": _source(checked, f"{event.span.file}:{event.span.line}"),
            })
    return rows


def branches_csv(checked: Checked) -> str:
    """The branch table as CSV, with the same two comment lines as timing.csv."""
    out = io.StringIO()
    out.write(f"# seqlang {__version__} branch table; tick_ns={_num(checked.plan.tick_s * 1e9)}; "
              f"shift_ticks={checked.plan.shift_ticks}\n")
    out.write(f"# CAUTION: {CAUTION}\n")
    writer = csv.DictWriter(out, COLUMNS, lineterminator="\n")
    writer.writeheader()
    writer.writerows(branch_rows(checked))
    return out.getvalue()


def has_branches(checked: Checked) -> bool:
    return bool(checked.plan.timeline.conditioned())
