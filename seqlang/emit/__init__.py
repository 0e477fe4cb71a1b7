"""Timing-table writers: CSV, JSON and sampled waveforms, written atomically."""
from __future__ import annotations

import os

from ..compile.pipeline import Checked
from .atomic import write_bytes
from .branches import branches_csv, has_branches
from .tables import timing_csv, timing_json
from .waveforms import waveforms_npz


def write_all(checked: Checked, directory: str) -> list[str]:
    """Write the three tables into `directory`; return their paths."""
    os.makedirs(directory, exist_ok=True)
    outputs = {
        "timing.csv": timing_csv(checked).encode("utf-8"),
        "timing.json": timing_json(checked).encode("utf-8"),
        "waveforms.npz": waveforms_npz(checked),
    }
    if has_branches(checked):
        outputs["branches.csv"] = branches_csv(checked).encode("utf-8")
    paths = []
    for name, data in outputs.items():
        path = os.path.join(directory, name)
        write_bytes(path, data)
        paths.append(path)
    return paths
