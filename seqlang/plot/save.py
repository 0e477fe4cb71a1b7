"""Figures to bytes and files: PNG for files, SVG for the report; reproducible output.

Matplotlib stamps dates and random ids into its outputs by default; both are
switched off so that identical inputs give byte-identical images.
"""
from __future__ import annotations

import io

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from ..emit.atomic import write_bytes  # noqa: E402

DPI = 120


def figure_bytes(fig, fmt: str = "png", dpi: int = DPI) -> bytes:
    """The figure rendered as PNG, SVG or PDF; the figure is closed afterwards."""
    from .formats import _METADATA
    buffer = io.BytesIO()
    metadata = _METADATA[fmt]
    with matplotlib.rc_context({"svg.hashsalt": "seqlang", "svg.fonttype": "none"}):
        fig.savefig(buffer, format=fmt, dpi=dpi, metadata=metadata)
    plt.close(fig)
    return buffer.getvalue()


def save_png(fig, path: str) -> None:
    """Write the figure to `path` atomically, in the format its extension names (.png, .svg, .pdf)."""
    from .formats import figure_format
    write_bytes(path, figure_bytes(fig, figure_format(path)))
