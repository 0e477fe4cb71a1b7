"""One self-contained HTML report per run, and the notebook views of results.

The builders are loaded on first use, so that registering the `report` command
does not import numpy and matplotlib (start-up time of every command).
"""
from __future__ import annotations

__all__ = ["build_report", "write_report"]


def __getattr__(name: str):
    if name in __all__:
        from . import build
        return getattr(build, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
