"""The Python API, for notebooks: the same jobs as the command line.

>>> import seqlang
>>> seq = seqlang.load("programs/rabi_ramsey.seq")       # doctest: +SKIP
>>> seq.timeline.events[0].duration_s                     # doctest: +SKIP
"""
from __future__ import annotations

from dataclasses import dataclass

from .compile.hardware import HardwarePlan
from .compile.pipeline import Checked, check
from .compile.timeline import Timeline
from .lang.diagnostics import Diagnostic
from .program.model import Program


@dataclass(frozen=True)
class Sequence:
    """A loaded, checked sequence file."""

    path: str
    checked: Checked

    @property
    def program(self) -> Program:
        return self.checked.program

    @property
    def timeline(self) -> Timeline:
        """The drive-level timeline as written (before tick rounding)."""
        return self.checked.timeline

    @property
    def played(self) -> Timeline:
        """The timeline after tick quantization and latency shift: what the atoms see."""
        return self.checked.quantized

    @property
    def warnings(self) -> tuple[Diagnostic, ...]:
        return self.checked.warnings

    def compile(self) -> HardwarePlan:
        """The hardware plan (per-port tick tables); write it with :func:`write_tables`."""
        return self.checked.plan

    def write_tables(self, directory: str) -> list[str]:
        """Write timing.csv, timing.json and waveforms.npz into `directory`."""
        from .emit import write_all
        return write_all(self.checked, directory)

    def _repr_html_(self) -> str:
        """Jupyter: counts, the compile report and the timeline figure."""
        from .report.notebook import sequence_html
        return sequence_html(self)

    def to_dataframe(self):
        """The played timeline as a pandas DataFrame (pandas is optional)."""
        from .report.notebook import timeline_dataframe
        return timeline_dataframe(self)


def load(path: str, point: int | None = None, occupancy=None) -> Sequence:
    """Parse, resolve and check `path`; raises SeqlangError listing every problem.

    For a file with scans, `point` picks the scan point (default: the first).
    `occupancy` (a ``seqlang.arrays.loading.Occupancy``) says which traps loaded, for a
    rig whose species load with a probability (default: the draw with load seed 1).
    """
    if occupancy is None:
        return Sequence(path, check(path, point=point))
    from .arrays.stage import OCCUPANCY
    token = OCCUPANCY.set(occupancy)
    try:
        return Sequence(path, check(path, point=point))
    finally:
        OCCUPANCY.reset(token)


def scan(path: str, output: str, **options):
    """Compile (and with ``simulate=True`` simulate) every point of a scan; return the xarray Dataset.

    Options are those of ``seqlang scan`` (see docs/scans.md): simulate, noise, shots, seed,
    engine, truncate, repetitions, workers, scheduler, resume, only, progress.
    """
    from .scan.run import run_scan
    return run_scan(path, output, **options)
