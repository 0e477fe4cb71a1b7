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
    """The figure rendered as PNG or SVG; the figure is closed afterwards."""
    buffer = io.BytesIO()
    metadata = {"Software": None} if fmt == "png" else {"Date": None, "Creator": None}
    with matplotlib.rc_context({"svg.hashsalt": "seqlang", "svg.fonttype": "none"}):
        fig.savefig(buffer, format=fmt, dpi=dpi, metadata=metadata)
    plt.close(fig)
    return buffer.getvalue()


def save_png(fig, path: str) -> None:
    """Write the figure to `path` atomically (PNG, or SVG when the name ends in .svg)."""
    fmt = "svg" if path.lower().endswith(".svg") else "png"
    write_bytes(path, figure_bytes(fig, fmt))
