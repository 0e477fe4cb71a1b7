"""Formatter results as editor edits: the whole document, or only a range of lines.

Runs in the language server's worker (see :mod:`.worker`).
"""
from __future__ import annotations

import difflib

from ..lang.diagnostics import SeqlangError, Span, error
from ..lang.parser import parse_text
from .formatter import format_text, tree_shape

Edit = tuple[int, int, str]  # replace source lines [first, last) with the text


def document_edits(text: str, path: str) -> list[Edit]:
    """One edit replacing the whole text by its canonical form (none when tidy).

    Raises :class:`SeqlangError` as ``seqlang fmt`` would refuse (a syntax error,
    or a layout that would change the meaning)."""
    formatted = format_text(text, path)
    if formatted == text:
        return []
    return [(0, len(text.splitlines(keepends=True)) + 1, formatted)]


def range_edits(text: str, path: str, first_line: int, last_line: int) -> list[Edit]:
    """The formatter's changes that touch source lines `first_line`..`last_line` (0-based, inclusive).

    The other changes are left out; the result is re-parsed and refused, as
    ``seqlang fmt`` refuses, if leaving them out would change the meaning."""
    formatted = format_text(text, path)
    old, new = text.splitlines(keepends=True), formatted.splitlines(keepends=True)
    edits = []
    for tag, i1, i2, j1, j2 in difflib.SequenceMatcher(None, old, new, autojunk=False).get_opcodes():
        touches = i1 <= last_line and (i2 - 1 if i2 > i1 else i1) >= first_line
        if tag != "equal" and touches:
            edits.append((i1, i2, "".join(new[j1:j2])))
    _check_same_meaning(text, apply(text, edits), path)
    return edits


def apply(text: str, edits: list[Edit]) -> str:
    """The text with line edits applied (edits in order, not overlapping)."""
    lines = text.splitlines(keepends=True)
    for first, last, replacement in sorted(edits, reverse=True):
        lines[first:last] = [replacement]
    return "".join(lines)


def _check_same_meaning(before: str, after: str, path: str) -> None:
    try:
        same = tree_shape(parse_text(after, path)) == tree_shape(parse_text(before, path))
    except SeqlangError:
        same = False
    if not same:
        raise SeqlangError([error("formatting only this range would change the file's meaning; "
                                  "format the whole file instead", Span(path, 1, 1, 1, 1))])
