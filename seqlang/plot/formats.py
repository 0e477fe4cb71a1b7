"""Figure formats named by the output file's extension.

matplotlib writes each of these itself; metadata that would carry the date or
the library version is left out, so identical inputs give identical files.
"""
from __future__ import annotations

import os

FORMATS = {".png": "png", ".svg": "svg", ".pdf": "pdf"}
# What each backend would otherwise stamp into the file (dates, versions, random ids).
_METADATA = {"png": {"Software": None}, "svg": {"Date": None, "Creator": None},
             "pdf": {"CreationDate": None, "Creator": None, "Producer": None}}


class FormatError(ValueError):
    """The output file's extension names no format we write."""


def figure_format(path: str) -> str:
    """The format for `path` from its extension; FormatError for any other."""
    extension = os.path.splitext(path)[1].lower()
    if extension not in FORMATS:
        known = ", ".join(FORMATS)
        raise FormatError(f"cannot tell the figure format of `{path}`: use one of {known}")
    return FORMATS[extension]


def figure_bytes(fig, path: str, dpi: int = 110) -> bytes:
    """The figure rendered in the format that `path` names."""
    import io

    import matplotlib
    kind = figure_format(path)
    buffer = io.BytesIO()
    with matplotlib.rc_context({"svg.hashsalt": "seqlang"}):
        fig.savefig(buffer, format=kind, dpi=dpi, metadata=_METADATA[kind])
    return buffer.getvalue()
