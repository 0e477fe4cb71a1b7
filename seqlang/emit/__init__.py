"""Timing-table writers: CSV, JSON and sampled waveforms, written atomically."""
from __future__ import annotations

from ..compile.pipeline import Checked
from .atomic import write_set
from .branches import branches_csv, has_branches
from .tables import timing_csv, timing_json
from .waveforms import waveforms_npz


def write_all(checked: Checked, directory: str) -> list[str]:
    """Write the tables (three, and the branch and rearrangement tables where they apply) into `directory` as one set; return their paths.

    The folder is replaced as a whole (see :mod:`seqlang.emit.atomic`): a reader
    never finds a new `timing.csv` beside an old `timing.json`.
    """
    outputs = {
        "timing.csv": timing_csv(checked).encode("utf-8"),
        "timing.json": timing_json(checked).encode("utf-8"),
        "waveforms.npz": waveforms_npz(checked),
    }
    if has_branches(checked):  # feed-forward: the branch table belongs to the same set
        outputs["branches.csv"] = branches_csv(checked).encode("utf-8")
    state = checked.program.arrays
    if state is not None and state.plans:  # rearrangement: the plan, leg by leg
        from .arrays import rearrangement_csv
        outputs["rearrangement.csv"] = rearrangement_csv(state).encode("utf-8")
    return write_set(directory, outputs)
