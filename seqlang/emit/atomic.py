"""Atomic file writes: a temporary file in the same directory, then rename.

A reader sees the old file or the new one, never half of one; an interrupted
run leaves the earlier output in place.
"""
from __future__ import annotations

import os
import tempfile


def write_bytes(path: str, data: bytes) -> None:
    """Replace `path` with `data` atomically."""
    directory = os.path.dirname(os.path.abspath(path))
    handle, temporary = tempfile.mkstemp(prefix=".seqlang-", dir=directory)
    try:
        with os.fdopen(handle, "wb") as out:
            out.write(data)
            out.flush()
            os.fsync(out.fileno())
        os.replace(temporary, path)
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise


def write_text(path: str, text: str) -> None:
    write_bytes(path, text.encode("utf-8"))
