"""`seqlang check` of a file with scans: every point, with the point named in each message.

The files are read and parsed once; each point is resolved and checked with the
ordinary passes. A finding that appears at every point is reported once, as for
a file without scans; one that depends on the point names the first point where
it appears ("at t = 1.4 us: ...") and how many more points share it.
"""
from __future__ import annotations

from dataclasses import dataclass

from ..compile.pipeline import Checked, check_program
from ..lang.diagnostics import Diagnostic, SeqlangError
from ..program.resolve import Loaded, load_files, resolve_point
from ..program.scans import ScanSpace, resolve_scans


@dataclass(frozen=True)
class CheckedScan:
    """Every point passed: the first point's checked program, the space and the warnings."""

    first: Checked
    space: ScanSpace | None
    count: int
    warnings: tuple[Diagnostic, ...]


def check_points(path: str) -> CheckedScan:
    """Check every point of `path`; raise SeqlangError naming the points where problems are."""
    loaded = load_files(path)
    space = resolve_scans(loaded.main, [])
    count = space.count if space is not None else 1
    found: dict[Diagnostic, list[int]] = {}
    first = None
    for index in range(count):
        checked, diagnostics = _check_one(loaded, index)
        first = first or checked
        for d in diagnostics:
            found.setdefault(d, []).append(index)
    merged = [_labelled(d, points, space, count) for d, points in found.items()]
    if first is None or any(d.is_error for d in merged):
        raise SeqlangError(merged)
    return CheckedScan(first, space, count, tuple(merged))


def _check_one(loaded: Loaded, index: int) -> tuple[Checked | None, tuple[Diagnostic, ...]]:
    try:
        program, diags = resolve_point(loaded, index)
        checked = check_program(program, diags)
    except SeqlangError as exc:
        return None, exc.diagnostics
    return checked, checked.warnings


def _labelled(d: Diagnostic, points: list[int], space: ScanSpace | None, count: int) -> Diagnostic:
    if space is None or len(points) == count:
        return d
    more = len(points) - 1
    tail = f" (and {more} more point{'s' if more != 1 else ''})" if more else ""
    message = f"at {space.label(space.point(points[0]))}: {d.message}{tail}"
    return Diagnostic(d.severity, message, d.span, d.hint)
