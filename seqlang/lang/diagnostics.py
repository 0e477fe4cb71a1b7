"""Source spans, structured diagnostics and the one renderer that prints them.

Every error a user can cause is a :class:`Diagnostic` with a :class:`Span`;
tools read the fields, the command line prints them with :func:`render`.
"""
from __future__ import annotations

import difflib
import re
import struct
import threading
from dataclasses import dataclass, field
from typing import Iterable

from .source_text import split_lines

ERROR = "error"
WARNING = "warning"
NOTE = "note"


class Span(bytes):
    """A range of source text: 1-based line/column of start and end, and offsets.

    Built as ``Span(file, line, column, end_line, end_column, start=0, end=0)`` and read
    by those attribute names. Stored packed, seven unsigned 32-bit numbers (the file as
    an index into this process's list of file names) in 28 bytes: a generated program
    has millions of spans, and a tuple of seven fields with its own integers took
    twice the memory. Immutable and hashable; equal when every field is; ordered by
    (file, line, column, ...) as a tuple of its fields would be. It pickles by its
    fields, so another process maps the file name to its own index."""

    __slots__ = ()

    def __new__(cls, file: str, line: int, column: int, end_line: int, end_column: int,
                start: int = 0, end: int = 0) -> "Span":
        return _new_bytes(cls, _PACKED.pack(file_index(file), *(
            min(max(int(v), 0), _LARGEST) for v in (line, column, end_line, end_column, start, end))))

    @property
    def file(self) -> str:
        return _FILES[_FIELD.unpack_from(self, 0)[0]]

    line = property(lambda self: _FIELD.unpack_from(self, 4)[0], doc="1-based line of the start")
    column = property(lambda self: _FIELD.unpack_from(self, 8)[0], doc="1-based column of the start")
    end_line = property(lambda self: _FIELD.unpack_from(self, 12)[0], doc="line of the end")
    end_column = property(lambda self: _FIELD.unpack_from(self, 16)[0], doc="column just after the end")
    start = property(lambda self: _FIELD.unpack_from(self, 20)[0], doc="offset of the start in the text")
    end = property(lambda self: _FIELD.unpack_from(self, 24)[0], doc="offset just after the end")

    def fields(self) -> tuple:
        """(file, line, column, end_line, end_column, start, end)."""
        index, *rest = _PACKED.unpack(self)
        return (_FILES[index], *rest)

    def _replace(self, **changes) -> "Span":
        values = dict(zip(SPAN_FIELDS, self.fields()))
        values.update(changes)
        return Span(*(values[name] for name in SPAN_FIELDS))

    def label(self) -> str:
        return f"{self.file}:{self.line}:{self.column}"

    def __repr__(self) -> str:
        return "Span(" + ", ".join(f"{k}={v!r}" for k, v in zip(SPAN_FIELDS, self.fields())) + ")"

    __str__ = __repr__

    # Ordered by the fields, not by the packed bytes (whose order would follow file indices).
    def __lt__(self, other: "Span") -> bool:
        return self.fields() < other.fields()

    def __le__(self, other: "Span") -> bool:
        return self.fields() <= other.fields()

    def __gt__(self, other: "Span") -> bool:
        return self.fields() > other.fields()

    def __ge__(self, other: "Span") -> bool:
        return self.fields() >= other.fields()

    def __reduce__(self):
        return Span, self.fields()


SPAN_FIELDS = ("file", "line", "column", "end_line", "end_column", "start", "end")
_PACKED = PACKED_SPAN = struct.Struct("<7I")   # (file index, line, column, end_line, end_column, start, end)
_FIELD = struct.Struct("<I")
_LARGEST = 2**32 - 1
_new_bytes = bytes.__new__
_FILES: list[str] = []
_FILE_INDEX: dict[str, int] = {}
_FILES_LOCK = threading.Lock()


def file_index(file: str) -> int:
    """The index of a file name in this process's list (added on first use; under a lock, so
    that two threads of the editor server never give one file two indices)."""
    index = _FILE_INDEX.get(file)
    if index is None:
        with _FILES_LOCK:
            index = _FILE_INDEX.get(file)
            if index is None:
                _FILES.append(file)
                index = _FILE_INDEX[file] = len(_FILES) - 1
    return index


def span_packer(file: str):
    """A fast builder of spans in `file` from the six numbers (for the parser: no clamping,
    the numbers are a source text's lines, columns and offsets, within 32 bits since a
    source file holds at most 64 MiB)."""
    index, pack = file_index(file), _PACKED.pack
    return lambda line, column, end_line, end_column, start, end: _new_bytes(
        Span, pack(index, line, column, end_line, end_column, start, end))


NO_SPAN = Span("<builtin>", 1, 1, 1, 1)


@dataclass(frozen=True)
class Diagnostic:
    """One finding: severity, message, where, and an optional hint."""

    severity: str
    message: str
    span: Span
    hint: str | None = None

    def __post_init__(self):
        # A name or path holding control characters is echoed with them escaped, so a
        # message stays one line and a terminal sees no control sequences.
        object.__setattr__(self, "message", _escape_controls(self.message))
        if self.hint is not None:
            object.__setattr__(self, "hint", _escape_controls(self.hint))
        # A name of a megabyte must not be echoed whole (by the terminal or an editor).
        if len(self.message) > MAX_QUOTED:
            object.__setattr__(self, "message", _shorten_quoted(self.message))
        if self.hint is not None and len(self.hint) > MAX_QUOTED:
            object.__setattr__(self, "hint", _shorten_quoted(self.hint))

    @property
    def is_error(self) -> bool:
        return self.severity == ERROR


class SeqlangError(Exception):
    """Raised when a stage cannot go on; carries every diagnostic found so far."""

    def __init__(self, diagnostics: Iterable[Diagnostic]):
        self.diagnostics = tuple(diagnostics)
        super().__init__("; ".join(d.message for d in self.diagnostics))


# Quoted names and source excerpts longer than this are shortened, saying how long they are.
MAX_QUOTED = 80
MAX_EXCERPT = 160


def shorten(text: str, limit: int = MAX_QUOTED) -> str:
    """`text` itself, or its start and end around "…" with its length, when longer than `limit`."""
    if len(text) <= limit:
        return text
    keep = limit // 2
    return f"{text[:keep]}…{text[-8:]} ({len(text):,} characters)"


_CONTROLS = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029]")


def _escape_controls(text: str) -> str:
    return _CONTROLS.sub(lambda m: repr(m.group())[1:-1], text)


def _shorten_quoted(message: str) -> str:
    message = re.sub(r"`([^`]{%d,})`" % (MAX_QUOTED + 1), lambda m: f"`{shorten(m.group(1))}`", message)
    return shorten(message, 4 * MAX_QUOTED)


def error(message: str, span: Span, hint: str | None = None) -> Diagnostic:
    return Diagnostic(ERROR, message, span, hint)


def warning(message: str, span: Span, hint: str | None = None) -> Diagnostic:
    return Diagnostic(WARNING, message, span, hint)


def did_you_mean(name: str, candidates: Iterable[str]) -> str | None:
    """A "did you mean" hint for a misspelt name, or None when nothing is close."""
    if len(name) > MAX_QUOTED:
        return None  # nothing is close to a name that long, and comparing would be slow
    close = difflib.get_close_matches(name, sorted(set(candidates)), n=1, cutoff=0.6)
    return f"did you mean `{close[0]}`?" if close else None


@dataclass
class SourceRegistry:
    """Texts of the files read in this run, so diagnostics can quote them."""

    texts: dict[str, str] = field(default_factory=dict)
    _lines: dict[str, list[str]] = field(default_factory=dict, repr=False)

    def add(self, path: str, text: str) -> None:
        self.texts[path] = text
        self._lines.pop(path, None)

    def line(self, path: str, number: int) -> str | None:
        """Line `number` (1-based), split exactly as the lexer counts lines."""
        text = self.texts.get(path)
        if text is None:
            return None
        if path not in self._lines:
            self._lines[path] = split_lines(text)
        lines = self._lines[path]
        return lines[number - 1] if 0 < number <= len(lines) else None


SOURCES = SourceRegistry()


def render(diagnostic: Diagnostic, sources: SourceRegistry = SOURCES) -> str:
    """``file:line:col: severity: message``, the source line, a caret, the hint."""
    span = diagnostic.span
    out = [f"{span.label()}: {diagnostic.severity}: {diagnostic.message}"]
    text = sources.line(span.file, span.line)
    if text is not None:
        width = span.end_column - span.column if span.end_line == span.line else 1
        text, column, width = _excerpt(text, span.column, max(1, width))
        out.append(f"  {text}")
        out.append("  " + " " * (column - 1) + "^" * width)
    if diagnostic.hint:
        out.append(f"  hint: {diagnostic.hint}")
    return "\n".join(out)


# Characters shown as one visible character each, so that the caret stays under its column:
# blanks as a space, other control characters (a null byte, separators) as U+FFFD.
_VISIBLE = {c: " " for c in "\t\f\v"}
_VISIBLE.update({chr(c): "\ufffd" for c in list(range(32)) + list(range(0x7f, 0xa0)) + [0x2028, 0x2029]
                 if chr(c) not in _VISIBLE})
_VISIBLE_TABLE = str.maketrans(_VISIBLE)


def _excerpt(text: str, column: int, width: int) -> tuple[str, int, int]:
    """The source line as shown: invisible characters made visible, and a long line cut to a
    window around the caret; the caret's new column and width."""
    text = text.translate(_VISIBLE_TABLE)
    if len(text) <= MAX_EXCERPT:
        return text, column, width
    width = min(width, MAX_EXCERPT // 2)
    begin = max(0, min(column - 1 - MAX_EXCERPT // 4, len(text) - MAX_EXCERPT))
    window = text[begin:begin + MAX_EXCERPT]
    prefix = "…" if begin > 0 else ""
    suffix = f"… ({len(text):,} characters)" if begin + MAX_EXCERPT < len(text) else ""
    return prefix + window + suffix, column - begin + len(prefix), width


def render_all(diagnostics: Iterable[Diagnostic], sources: SourceRegistry = SOURCES) -> str:
    return "\n".join(render(d, sources) for d in sort_diagnostics(diagnostics))


def sort_diagnostics(diagnostics: Iterable[Diagnostic]) -> list[Diagnostic]:
    """Deterministic order: by file, line, column, then message."""
    return sorted(set(diagnostics), key=lambda d: (d.span.file, d.span.line, d.span.column, d.message))
