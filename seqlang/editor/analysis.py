"""What the language server knows of one document: its syntax tree, its checked
program, its diagnostics, and the symbols of the files it includes.

:func:`analyse` runs in the budgeted worker (see :mod:`.worker`); the server
keeps the returned :class:`Analysis` and answers requests from it without
parsing or reading files itself.
"""
from __future__ import annotations

import os
import re
from dataclasses import dataclass
from functools import cached_property
from typing import Callable, Iterator, Mapping

from ..lang import syntax as ast
from ..lang.diagnostics import ERROR, Diagnostic, SeqlangError, Span
from ..lang.parser import parse_text
from ..lang.source_text import normalise

MAX_INCLUDED_BYTES = 4 * 1024 * 1024  # an included file larger than this is not indexed
WORD = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


@dataclass(frozen=True)
class Analysis:
    """One version of a document: parsed (or not), checked (or not), its diagnostics,
    and the parsed files it includes (its rig, its imports)."""

    path: str
    text: str
    source: ast.SourceFile | None
    checked: object | None  # seqlang.compile.pipeline.Checked
    diagnostics: tuple[Diagnostic, ...]
    related: tuple[ast.SourceFile, ...] = ()
    includes: frozenset[str] = frozenset()  # every file it `use`s or `import`s, parsed or not

    @property
    def files(self) -> list[ast.SourceFile]:
        """The document's own tree first, then the files it includes."""
        return ([self.source] if self.source else []) + list(self.related)

    @property
    def depends_on(self) -> frozenset[str]:
        """Paths of the included files: a change to one of them re-checks this document."""
        return self.includes | frozenset(f.path for f in self.related)

    @cached_property
    def symbols(self) -> list["Symbol"]:
        return [s for f in self.files for s in declared(f)]

    @cached_property
    def events_by_statement(self) -> dict[tuple[str, int], list]:
        """Played timeline events keyed by the (file, offset) of the statement that made them."""
        out: dict[tuple[str, int], list] = {}
        for event in self.checked.quantized.events if self.checked else ():
            out.setdefault((event.span.file, event.span.start), []).append(event)
        return out


@dataclass(frozen=True)
class Symbol:
    """A declared name: what it is, where its name is written, and its node."""

    name: str
    kind: str
    span: Span
    node: object
    scope: Span | None = None  # block parameters are visible only inside their block


def analyse(path: str, text: str, overlays: Mapping[str, str]) -> Analysis:
    """Parse and check a document; never raises (every failure becomes a diagnostic)."""
    text = normalise(text)  # spans count CR LF and CR as one line end, as the parser does
    try:
        source = parse_text(text, path)
    except SeqlangError as exc:
        return Analysis(path, text, None, None, exc.diagnostics)
    wanted: set[str] = set()

    def read(target: str) -> ast.SourceFile | None:
        wanted.add(target)
        return _read(target, overlays)
    related = tuple(related_files(source, read)[1:])
    known = dict(related=related, includes=frozenset(wanted))
    if not _checkable(source):
        return Analysis(path, text, source, None, (), **known)
    from ..compile.pipeline import check
    try:
        checked = check(path, {**overlays, path: text})
        return Analysis(path, text, source, checked, tuple(checked.warnings), **known)
    except SeqlangError as exc:
        return Analysis(path, text, source, None, exc.diagnostics, **known)
    except (MemoryError, RecursionError):
        raise  # the worker reports these as a spent budget
    except Exception as exc:  # a checker bug must not take the editor's server down
        message = f"internal error in seqlang's checker (please report it): {type(exc).__name__}: {exc}"
        return Analysis(path, text, source, None, (Diagnostic(ERROR, message, Span(path, 1, 1, 1, 1)),), **known)


def _checkable(source: ast.SourceFile) -> bool:
    # A library of blocks (no `use`, no `rig`, no `sequence`) is checked through the files
    # that import it; a sequence without a rig is checked, so that it hears it lacks one.
    return any(isinstance(i, (ast.UseStmt, ast.RigDef, ast.SequenceDef)) for i in source.items)


def _read(path: str, overlays: Mapping[str, str]) -> ast.SourceFile | None:
    """An included file's tree, from its open buffer or its seqlang file on disk."""
    text = overlays.get(path)
    try:
        if text is None:
            if os.path.splitext(path)[1] not in (".seq", ".rig") or not os.path.isfile(path):
                return None  # never index a foreign or special file
            with open(path, encoding="utf-8") as handle:
                text = handle.read(MAX_INCLUDED_BYTES + 1)
        if len(text) > MAX_INCLUDED_BYTES:
            return None
        return parse_text(text, path)
    except (OSError, UnicodeDecodeError, SeqlangError):
        return None


def relative_path(base: str, target: str) -> str:
    """A `use`/`import` path as the resolver forms it."""
    return os.path.normpath(os.path.join(os.path.dirname(base), target))


# ---- the symbol index ---------------------------------------------------------------
def declared(source: ast.SourceFile) -> list[Symbol]:
    """Every name declared in one file, in order."""
    out: list[Symbol] = []
    for item in source.items:
        out.extend(declared_by(item))
    return out


def declared_by(item) -> Iterator[Symbol]:
    """The names one top-level item declares, the item's own name first."""
    if isinstance(item, ast.RigDef):
        yield Symbol(item.name.name, "rig", item.name.span, item)
        for decl in item.species + item.drives + item.ports:
            kind = {ast.SpeciesDecl: "species", ast.DriveDecl: "drive", ast.PortDecl: "port"}[type(decl)]
            yield Symbol(decl.name.name, kind, decl.name.span, decl)
        for let in item.lets:
            yield Symbol(let.name.name, "constant", let.name.span, let)
    elif isinstance(item, (ast.LetStmt, ast.SiteStmt, ast.GroupStmt, ast.SequenceDef)):
        kind = {ast.LetStmt: "constant", ast.SiteStmt: "site", ast.GroupStmt: "group",
                ast.SequenceDef: "sequence"}[type(item)]
        yield Symbol(item.name.name, kind, item.name.span, item)
        yield from _local_lets(getattr(item, "body", ()), item.span)
    elif isinstance(item, ast.ScanDecl) and "." not in item.target.name:
        yield Symbol(item.target.name, "constant", item.target.span, item)  # a scanned name
    elif isinstance(item, ast.FreeDecl):
        yield Symbol(item.name.name, "constant", item.name.span, item)
    elif isinstance(item, ast.BlockDef):
        yield Symbol(item.name.name, "block", item.name.span, item)
        for param in item.params:
            yield Symbol(param.name.name, "parameter", param.name.span, param, item.span)
        yield from _local_lets(item.body, item.span)


def _local_lets(body, scope: Span) -> Iterator[Symbol]:
    for stmt in body:
        if isinstance(stmt, ast.LetStmt):
            yield Symbol(stmt.name.name, "constant", stmt.name.span, stmt, scope)
        for part in ("body", "then", "otherwise"):  # `when` keeps its statements in then/otherwise
            yield from _local_lets(getattr(stmt, part, None) or (), scope)


def related_files(source: ast.SourceFile, read: Callable[[str], ast.SourceFile | None]) -> list[ast.SourceFile]:
    """The file, its rig file and its imports (transitively), each once."""
    seen, queue, out = {source.path}, [source], [source]
    while queue:
        current = queue.pop(0)
        for item in current.items:
            if isinstance(item, (ast.UseStmt, ast.ImportStmt)):
                target = relative_path(current.path, item.path)
                parsed = None if target in seen else read(target)
                seen.add(target)
                if parsed is not None:
                    out.append(parsed)
                    queue.append(parsed)
    return out


def find_symbol(symbols: list[Symbol], name: str, path: str, offset: int) -> Symbol | None:
    """The declaration `name` refers to at `offset`: a visible local first, then any global."""
    candidates = [s for s in symbols if s.name == name]
    local = [s for s in candidates if s.scope and s.scope.file == path and s.scope.start <= offset <= s.scope.end]
    global_ = [s for s in candidates if s.scope is None]
    return (local or global_ or [None])[0]


def word_at(text: str, offset: int) -> tuple[str, int] | None:
    """The identifier touching `offset` and where it starts, or None."""
    line_start = text.rfind("\n", 0, offset) + 1
    line_end = text.find("\n", offset)
    line = text[line_start:line_end if line_end >= 0 else len(text)]
    for match in WORD.finditer(line):
        if match.start() <= offset - line_start <= match.end():
            return match.group(), line_start + match.start()
    return None


def statement_at(source: ast.SourceFile, offset: int, kind: type):
    """The innermost statement of type `kind` whose span holds `offset`."""
    found = None
    stack = list(source.items)
    while stack:
        node = stack.pop()
        if node.span.start <= offset <= node.span.end:
            if isinstance(node, kind):
                found = node
            stack.extend(getattr(node, "body", ()))
    return found
