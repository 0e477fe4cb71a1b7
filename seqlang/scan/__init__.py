"""Scans: one program, many points — checked, compiled, simulated, stored (docs/scans.md).

The package sits above the pipeline: it resolves the program's files once,
re-evaluates them per point with the ordinary passes, and owns the point index,
the per-point seeds, the result store and the executors. Nothing below it knows
about points.
"""
from __future__ import annotations

import sys
import types


class _ScanModule(types.ModuleType):
    """`seqlang.scan` is both this package and the API function: importing the package
    (which Python binds to the name `seqlang.scan`) must not hide ``seqlang.scan(path, ...)``."""

    def __call__(self, path: str, output: str, **options):
        from ..api import scan
        return scan(path, output, **options)


sys.modules[__name__].__class__ = _ScanModule
