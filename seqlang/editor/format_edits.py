"""Formatter results as editor edits: the whole document, or only a range of lines.

Runs in the language server's worker (see :mod:`.worker`).
"""
from __future__ import annotations

import difflib

from ..lang.diagnostics import SeqlangError, Span, error
from ..lang.parser import parse_text
from ..lang.source_text import normalise
from .formatter import format_text, tree_shape

Edit = tuple[int, int, str]  # replace source lines [first, last) with the text


def document_edits(text: str, path: str) -> list[Edit]:
    """One edit replacing the whole text by its canonical form (none when tidy).

    Raises :class:`SeqlangError` as ``seqlang fmt`` would refuse (a syntax error,
    or a layout that would change the meaning)."""
    text = normalise(text)
    formatted = format_text(text, path)
    if formatted == text:
        return []
    return [(0, len(_lines(text)) + 1, formatted)]


def range_edits(text: str, path: str, first_line: int, last_line: int) -> list[Edit]:
    """The formatter's changes that touch source lines `first_line`..`last_line` (0-based, inclusive).

    The other changes are left out; the result is re-parsed and refused, as
    ``seqlang fmt`` refuses, if leaving them out would change the meaning."""
    text = normalise(text)
    formatted = format_text(text, path)
    old, new = _lines(text), _lines(formatted)
    edits = [edit for edit in _hunks(old, new)
             if edit[0] <= last_line and (edit[1] - 1 if edit[1] > edit[0] else edit[0]) >= first_line]
    _check_same_meaning(text, apply(text, edits), path)
    return edits


def _lines(text: str) -> list[str]:
    """Lines with their `\n`, split only where the parser counts a line end."""
    parts = text.split("\n")
    return [p + "\n" for p in parts[:-1]] + ([parts[-1]] if parts[-1] else [])


def _hunks(old: list[str], new: list[str]) -> list[Edit]:
    """The changes between two texts' lines; a run of changed lines that keeps its length
    is split line by line, so a range can take some of them."""
    out = []
    for tag, i1, i2, j1, j2 in difflib.SequenceMatcher(None, old, new, autojunk=False).get_opcodes():
        if tag == "equal":
            continue
        if i2 - i1 == j2 - j1:
            out += [(i1 + k, i1 + k + 1, new[j1 + k]) for k in range(i2 - i1)]
        else:
            out.append((i1, i2, "".join(new[j1:j2])))
    return out


def apply(text: str, edits: list[Edit]) -> str:
    """The text with line edits applied (edits in order, not overlapping)."""
    lines = _lines(text)
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
