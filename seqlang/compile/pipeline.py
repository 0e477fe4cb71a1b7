"""The passes in order, so that tools and tests can run any prefix of them.

parse → resolve/check → lower → timing checks → quantize → hardware plan
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

from ..arrays.stage import occupy
from ..lang.diagnostics import ERROR, Diagnostic, SeqlangError
from ..lang.parser import cyclic_gc_paused
from ..program.model import Program
from ..program.resolve import resolve
from .checks import check_timeline, check_waveforms
from .decisions import check_decisions
from .geometry import check_geometry
from .hardware import HardwarePlan, latency_warnings, plan
from .lower import lower
from .quantize import quantize
from .timeline import Timeline


@dataclass(frozen=True)
class Checked:
    """A program that passed every check, its timeline, and the warnings."""

    program: Program
    timeline: Timeline
    quantized: Timeline
    plan: HardwarePlan
    warnings: tuple[Diagnostic, ...]


def check(path: str, sources: Mapping[str, str] | None = None, point: int | None = None) -> Checked:
    """Run every pass; raise :class:`SeqlangError` with all errors found.

    `sources` optionally maps paths to unsaved texts (see :func:`resolve`);
    `point` picks a scan point of a file with scans (default: the first).
    """
    with cyclic_gc_paused():
        program, diags = resolve(path, sources, point)
        return check_program(program, diags)


def check_program(program: Program, diags: list[Diagnostic]) -> Checked:
    """The passes after resolution (the occupancy of a shot, lowering, timing checks,
    quantization, hardware plan)."""
    if not any(d.severity == ERROR for d in diags):
        program = occupy(program)
    timeline = lower(program)
    diags = diags + check_timeline(program, timeline) + check_decisions(program, timeline)
    if not any(d.severity == ERROR for d in diags):
        diags += check_geometry(program, timeline)
    quantized, report, quant_diags = quantize(program, timeline)
    reported = {d.span for d in diags}  # the quantized timeline repeats what the written one showed
    diags += quant_diags + [d for d in check_timeline(program, quantized) if d.span not in reported]
    if not any(d.severity == ERROR for d in diags):
        diags += check_waveforms(program, quantized)
    # A statement inside `repeat` is checked once per iteration: the same message at the same
    # place is said once.
    diags = list(dict.fromkeys(diags))
    if any(d.severity == ERROR for d in diags):
        raise SeqlangError(diags)
    hardware = plan(program, quantized, report)
    return Checked(program, timeline, hardware.timeline, hardware, tuple(diags + latency_warnings(program)))
