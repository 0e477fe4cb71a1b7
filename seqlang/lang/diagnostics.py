"""Source spans, structured diagnostics and the one renderer that prints them.

Every error a user can cause is a :class:`Diagnostic` with a :class:`Span`;
tools read the fields, the command line prints them with :func:`render`.
"""
from __future__ import annotations

import difflib
from dataclasses import dataclass, field
from typing import Iterable

ERROR = "error"
WARNING = "warning"
NOTE = "note"


@dataclass(frozen=True)
class Span:
    """A range of source text: 1-based line/column of start and end, and offsets."""

    file: str
    line: int
    column: int
    end_line: int
    end_column: int
    start: int = 0
    end: int = 0

    def label(self) -> str:
        return f"{self.file}:{self.line}:{self.column}"


NO_SPAN = Span("<builtin>", 1, 1, 1, 1)


@dataclass(frozen=True)
class Diagnostic:
    """One finding: severity, message, where, and an optional hint."""

    severity: str
    message: str
    span: Span
    hint: str | None = None

    @property
    def is_error(self) -> bool:
        return self.severity == ERROR


class SeqlangError(Exception):
    """Raised when a stage cannot go on; carries every diagnostic found so far."""

    def __init__(self, diagnostics: Iterable[Diagnostic]):
        self.diagnostics = tuple(diagnostics)
        super().__init__("; ".join(d.message for d in self.diagnostics))


def error(message: str, span: Span, hint: str | None = None) -> Diagnostic:
    return Diagnostic(ERROR, message, span, hint)


def warning(message: str, span: Span, hint: str | None = None) -> Diagnostic:
    return Diagnostic(WARNING, message, span, hint)


def did_you_mean(name: str, candidates: Iterable[str]) -> str | None:
    """A "did you mean" hint for a misspelt name, or None when nothing is close."""
    close = difflib.get_close_matches(name, sorted(set(candidates)), n=1, cutoff=0.6)
    return f"did you mean `{close[0]}`?" if close else None


@dataclass
class SourceRegistry:
    """Texts of the files read in this run, so diagnostics can quote them."""

    texts: dict[str, str] = field(default_factory=dict)

    def add(self, path: str, text: str) -> None:
        self.texts[path] = text

    def line(self, path: str, number: int) -> str | None:
        text = self.texts.get(path)
        if text is None:
            return None
        lines = text.splitlines()
        return lines[number - 1] if 0 < number <= len(lines) else None


SOURCES = SourceRegistry()


def render(diagnostic: Diagnostic, sources: SourceRegistry = SOURCES) -> str:
    """``file:line:col: severity: message``, the source line, a caret, the hint."""
    span = diagnostic.span
    out = [f"{span.label()}: {diagnostic.severity}: {diagnostic.message}"]
    text = sources.line(span.file, span.line)
    if text is not None:
        width = span.end_column - span.column if span.end_line == span.line else 1
        out.append(f"  {text}")
        out.append("  " + " " * (span.column - 1) + "^" * max(1, width))
    if diagnostic.hint:
        out.append(f"  hint: {diagnostic.hint}")
    return "\n".join(out)


def render_all(diagnostics: Iterable[Diagnostic], sources: SourceRegistry = SOURCES) -> str:
    return "\n".join(render(d, sources) for d in sort_diagnostics(diagnostics))


def sort_diagnostics(diagnostics: Iterable[Diagnostic]) -> list[Diagnostic]:
    """Deterministic order: by file, line, column, then message."""
    return sorted(set(diagnostics), key=lambda d: (d.span.file, d.span.line, d.span.column, d.message))
