"""LSP positions and seqlang spans: 0-based lines and columns in the client's code units.

seqlang's spans count code points (1-based); the protocol counts UTF-16 code units
unless client and server agreed on UTF-8 or UTF-32 (LSP 3.17, `positionEncoding`).
Both agree on every text that is ASCII, which is checked first at no cost.

>>> offset_of("a😀b\\nc", lsp.Position(0, 3), "utf-16")   # the emoji takes two UTF-16 units
2
>>> position_of("a😀b\\nc", 2, "utf-16")
0:3
"""
from __future__ import annotations

from bisect import bisect_right
from functools import lru_cache
from typing import Callable

from lsprotocol import types as lsp

from ..lang.diagnostics import Span

UTF16 = "utf-16"


def units(text: str, encoding: str = UTF16) -> int:
    """How many code units `text` takes in the encoding."""
    if text.isascii() or encoding == "utf-32":
        return len(text)
    if encoding == "utf-8":
        return len(text.encode("utf-8", "surrogatepass"))
    return len(text) + sum(1 for char in text if ord(char) > 0xFFFF)


@lru_cache(maxsize=16)
def line_starts(text: str) -> tuple[int, ...]:
    """Offsets where each line starts (cached: the same texts are asked about again)."""
    starts, at = [0], text.find("\n")
    while at >= 0:
        starts.append(at + 1)
        at = text.find("\n", at + 1)
    return tuple(starts)


def _line(text: str, number: int) -> tuple[int, str]:
    starts = line_starts(text)
    start = starts[number]
    end = starts[number + 1] - 1 if number + 1 < len(starts) else len(text)
    return start, text[start:end]


def offset_of(text: str, position: lsp.Position, encoding: str = UTF16) -> int:
    """The text offset of an LSP position; a line or character past the end means the end
    (as the protocol says)."""
    starts = line_starts(text)
    if position.line >= len(starts):
        return len(text)
    start, line = _line(text, position.line)
    if line.isascii() or encoding == "utf-32":
        return start + min(position.character, len(line))
    counted = 0
    for index, char in enumerate(line):
        if counted >= position.character:
            return start + index
        counted += units(char, encoding)
    return start + len(line)


def position_of(text: str, offset: int, encoding: str = UTF16) -> lsp.Position:
    """The LSP position of a text offset."""
    offset = max(0, min(offset, len(text)))
    number = bisect_right(line_starts(text), offset) - 1
    start = line_starts(text)[number]
    return lsp.Position(number, units(text[start:offset], encoding))


def span_range(span: Span, text: str | None, encoding: str = UTF16) -> lsp.Range:
    """A span (1-based, code points) as an LSP range; columns are converted when the
    file's text is known."""
    def position(line: int, column: int) -> lsp.Position:
        line, column = max(line - 1, 0), max(column - 1, 0)
        if text is None or text.isascii() or encoding == "utf-32" or line >= len(line_starts(text)):
            return lsp.Position(line, column)
        _, written = _line(text, line)
        return lsp.Position(line, units(written[:column], encoding))
    return lsp.Range(position(span.line, span.column), position(span.end_line, span.end_column))


# ---- a cursor in an older version of the text ----------------------------------------------
def map_offset(new: str, old: str, offset: int) -> int | None:
    """Where the cursor at `offset` in `new` is in `old`, when its line lies above or below
    the changed part of the text (the usual case: one region edited since); else None."""
    if new == old:
        return offset
    line_start = new.rfind("\n", 0, offset) + 1
    line_end = new.find("\n", offset)
    line_end = len(new) if line_end < 0 else line_end
    prefix, suffix = _unchanged_ends(new, old)
    if line_end < prefix:  # the change is below the cursor's line
        return offset
    if line_start > len(new) - suffix:  # the change is above the cursor's line
        return offset - len(new) + len(old)
    return None


@lru_cache(maxsize=8)
def _unchanged_ends(new: str, old: str) -> tuple[int, int]:
    """How many characters at the start and at the end two texts share (without overlap).
    Cached: completion and hover ask again for the same pair of texts."""
    prefix = _common_length(min(len(new), len(old)), lambda i, j: new[i:j] == old[i:j])
    room = min(len(new), len(old)) - prefix
    suffix = _common_length(room, lambda i, j: new[len(new) - j:len(new) - i] == old[len(old) - j:len(old) - i])
    return prefix, suffix


def _common_length(limit: int, same: Callable[[int, int], bool], block: int = 65536) -> int:
    """The largest n <= limit with same(0, n): whole blocks first, then bisection inside the
    first block that differs (slices compare at C speed; each character is copied about once)."""
    start = 0
    while start < limit and same(start, min(start + block, limit)):
        start = min(start + block, limit)
    low, high = start, min(start + block, limit)
    while low < high:
        middle = (low + high + 1) // 2
        if same(start, middle):
            low = middle
        else:
            high = middle - 1
    return low
