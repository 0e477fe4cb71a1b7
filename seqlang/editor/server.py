"""`seqlang lsp`: a Language Server Protocol server over stdio.

Diagnostics come from the same checker as ``seqlang check`` (unsaved buffers
are handed to it as text overlays); hover, definition, references, completion
and the outline read the syntax tree, a small symbol index over the file, its
rig and its imports, and the checked timeline.
"""
from __future__ import annotations

import math
import os
import re
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Callable, Iterator, Mapping

from lsprotocol import types as lsp
from pygls.lsp.server import LanguageServer
from pygls.uris import from_fs_path, to_fs_path

from .. import __version__
from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import ERROR, Diagnostic, SeqlangError, Span
from ..lang.parser import parse_text
from ..lang.source_text import normalise
from ..program.rig import IMAGE_KEYS, PORT_KEYS, RIG_SETTINGS, SPECIES_KEYS, drive_keys
from ..program.sequence import PULSE_KEYS, TRIGGER_KEYS
from .formatter import expression
from .lexer import CONSTANTS, FUNCTIONS, KEYWORDS

WORD = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
INTERACTION_WAIT_S = 2.0  # how long a hover waits for a pair interaction before saying "computing"


# ---- analysis of one document ------------------------------------------------
@dataclass(frozen=True)
class Analysis:
    """What the server knows of one open document after its last change."""

    path: str
    text: str
    source: ast.SourceFile | None
    checked: object | None  # seqlang.compile.pipeline.Checked
    diagnostics: tuple[Diagnostic, ...]


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
    if not _checkable(source):
        return Analysis(path, text, source, None, ())
    from ..compile.pipeline import check
    try:
        checked = check(path, {**overlays, path: text})
        return Analysis(path, text, source, checked, tuple(checked.warnings))
    except SeqlangError as exc:
        return Analysis(path, text, source, None, exc.diagnostics)
    except Exception as exc:  # a checker bug must not take the editor's server down
        return Analysis(path, text, source, None, (Diagnostic(ERROR, f"internal error: {exc}", Span(path, 1, 1, 1, 1)),))


def _checkable(source: ast.SourceFile) -> bool:
    # A library of blocks (no `use`, no `rig`) is checked through the files that import it.
    return any(isinstance(i, (ast.UseStmt, ast.RigDef)) for i in source.items)


def relative_path(base: str, target: str) -> str:
    """A `use`/`import` path as the resolver forms it."""
    return os.path.normpath(os.path.join(os.path.dirname(base), target))


# ---- diagnostics in LSP terms -----------------------------------------------------
def lsp_range(span: Span) -> lsp.Range:
    """1-based inclusive-start/exclusive-end columns to LSP's 0-based positions."""
    start = lsp.Position(max(span.line - 1, 0), max(span.column - 1, 0))
    end = lsp.Position(max(span.end_line - 1, 0), max(span.end_column - 1, 0))
    return lsp.Range(start, end)


def lsp_diagnostics(analysis: Analysis) -> list[lsp.Diagnostic]:
    """The analysis's diagnostics; those in other files are shown at the `use`/`import` line."""
    out = []
    for diag in analysis.diagnostics:
        message = diag.message + (f"\nhint: {diag.hint}" if diag.hint else "")
        span = diag.span
        if span.file != analysis.path:
            message = f"in {span.label()}: {message}"
            span = _inclusion_span(analysis, span.file)
        severity = lsp.DiagnosticSeverity.Error if diag.is_error else lsp.DiagnosticSeverity.Warning
        out.append(lsp.Diagnostic(lsp_range(span), message, severity=severity, source="seqlang"))
    return out


def _inclusion_span(analysis: Analysis, other: str) -> Span:
    inclusions = [i for i in (analysis.source.items if analysis.source else ())
                  if isinstance(i, (ast.UseStmt, ast.ImportStmt))]
    for item in inclusions:
        if relative_path(analysis.path, item.path) == other:
            return item.span
    return inclusions[0].span if inclusions else Span(analysis.path, 1, 1, 1, 1)


# ---- the symbol index ---------------------------------------------------------------
def declared(source: ast.SourceFile) -> list[Symbol]:
    """Every name declared in one file, in order."""
    out: list[Symbol] = []
    for item in source.items:
        out.extend(_declared_by(item))
    return out


def _declared_by(item) -> Iterator[Symbol]:
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
    elif isinstance(item, ast.BlockDef):
        yield Symbol(item.name.name, "block", item.name.span, item)
        for param in item.params:
            yield Symbol(param.name.name, "parameter", param.name.span, param, item.span)
        yield from _local_lets(item.body, item.span)


def _local_lets(body, scope: Span) -> Iterator[Symbol]:
    for stmt in body:
        if isinstance(stmt, ast.LetStmt):
            yield Symbol(stmt.name.name, "constant", stmt.name.span, stmt, scope)
        yield from _local_lets(getattr(stmt, "body", ()), scope)


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


# ---- positions ---------------------------------------------------------------------------
def offset_of(text: str, position: lsp.Position) -> int:
    """The text offset of an LSP position."""
    lines = text.split("\n")  # the protocol's line ends (CR LF and CR are made LF first)
    before = sum(len(line) + 1 for line in lines[:position.line])
    return before + position.character


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


# ---- hover text --------------------------------------------------------------------------
def _q(value: float, dim) -> str:
    return units.format_quantity(value, dim)


def pulse_hover(events: list) -> str:
    """What the compiler made of one pulse statement, from its played timeline events."""
    first = events[0]
    lines = [f"**pulse** `{first.drive}` on {', '.join(first.targets)}"
             + (f" — played {len(events)} times" if len(events) > 1 else ""),
             f"- start: {_q(first.start_s, units.DURATION)}",
             f"- duration: {_q(first.duration_s, units.DURATION)}",
             f"- area: {first.area_rad / math.pi:.6g} π rad",
             f"- Rabi frequency Ω/2π: {_q(first.rabi_hz, units.FREQUENCY)}",
             f"- detuning Δ/2π: {_q(first.detuning_hz, units.FREQUENCY)}",
             f"- phase: {first.phase_rad:.6g} rad",
             f"- shape: {first.shape.kind}"]
    return "\n".join(lines)


def drive_hover(drive) -> str:
    """A drive's kind, species and limits."""
    low, high = drive.detuning_range_hz
    detuning = "unlimited" if math.isinf(low) and math.isinf(high) else \
        f"{_q(low, units.FREQUENCY)} .. {_q(high, units.FREQUENCY)}"
    return "\n".join([
        f"**drive** `{drive.name}`: {drive.kind} on species `{drive.species}` (reach {drive.reach})",
        f"- maximum Rabi frequency Ω/2π: {_q(drive.max_rabi_hz, units.FREQUENCY)}",
        f"- detuning range: {detuning}",
        f"- port: {drive.port}" + (f", gate {drive.gate}" if drive.gate else ""),
        f"- rise time: {_q(drive.rise_s, units.DURATION)}, latency: {_q(drive.latency_s, units.DURATION)}",
        f"- amplitude resolution: {drive.amplitude_bits} bits"])


def site_hover(program, name: str, interaction: Callable) -> str:
    """A site's species, coordinates and its nearest neighbours with their interaction."""
    site = program.sites[name]
    coords = ", ".join(f"{c * 1e6:.6g}" for c in site.position_m)
    lines = [f"**site** `{name}`: species `{site.species}` at ({coords}) um"]
    others = sorted((math.dist(site.position_m, o.position_m), o) for o in program.sites.values()
                    if o.name != name)
    for distance, other in others[:3]:
        lines.append(f"- `{other.name}` ({other.species}) at {_q(distance, units.LENGTH)}"
                     f"{interaction(program, site, other, distance)}")
    return "\n".join(lines)


def constant_hover(symbol: Symbol, program, text_of: Callable[[Span], str]) -> str:
    """A constant's value with units (from the checker when it knows it) and its definition."""
    written = expression(symbol.node.value, text_of(symbol.node.span))
    value = (program.constants if program else {}).get(symbol.name)
    if value is None or symbol.scope is not None:
        return f"**let** `{symbol.name}` = `{written}`"
    shown = value.describe() if hasattr(value, "describe") else \
        "(" + ", ".join(v.describe() for v in value) + ")" if isinstance(value, tuple) else str(value)
    return f"**let** `{symbol.name}` = {shown}\n\n`{written}`"


def plain_hover(symbol: Symbol, text_of: Callable[[Span], str]) -> str:
    """A declaration described from its syntax alone (when the program has not checked)."""
    node = symbol.node
    if isinstance(node, ast.BlockDef):
        params = ", ".join(p.name.name + (f" = {expression(p.default, text_of(p.span))}" if p.default else "")
                           for p in node.params)
        return f"**block** `{node.name.name}({params})`"
    if isinstance(node, ast.GroupStmt):
        return f"**group** `{node.name.name}` = {', '.join(m.name for m in node.members)}"
    if isinstance(node, ast.SpeciesDecl):
        return f"**species** `{node.name.name}` = {node.isotope.name}"
    if isinstance(node, ast.PortDecl):
        return f"**port** `{node.name.name}` = {node.channel.text}"
    if isinstance(node, ast.Param):
        return f"**parameter** `{node.name.name}`"
    return f"**{symbol.kind}** `{symbol.name}`"


# ---- completion ---------------------------------------------------------------------------
_SYMBOL_COMPLETION_KIND = {
    "site": lsp.CompletionItemKind.Variable, "group": lsp.CompletionItemKind.Variable,
    "drive": lsp.CompletionItemKind.Class, "species": lsp.CompletionItemKind.Class,
    "port": lsp.CompletionItemKind.Interface, "block": lsp.CompletionItemKind.Function,
    "constant": lsp.CompletionItemKind.Constant, "parameter": lsp.CompletionItemKind.Variable,
    "rig": lsp.CompletionItemKind.Module, "sequence": lsp.CompletionItemKind.Module,
}


def property_keys(text: str, offset: int) -> dict:
    """The property keys allowed where the cursor is (by the enclosing braces or the statement)."""
    line_start = text.rfind("\n", 0, offset) + 1
    first = (WORD.findall(text[line_start:offset]) or [""])[0]
    if first == "pulse":
        return PULSE_KEYS
    if first == "trigger":
        return TRIGGER_KEYS
    header = _enclosing_header(text, offset)
    words = WORD.findall(header)
    if not words:
        return {}
    if words[0] == "drive":
        return drive_keys(words[2] if len(words) > 2 else "")
    return {"species": SPECIES_KEYS, "image": IMAGE_KEYS, "port": PORT_KEYS, "rig": RIG_SETTINGS}.get(words[0], {})


def _enclosing_header(text: str, offset: int) -> str:
    depth = 0
    for position in range(offset - 1, -1, -1):
        char = text[position]
        if char == "}":
            depth += 1
        elif char == "{":
            if depth == 0:
                line_start = text.rfind("\n", 0, position) + 1
                return text[line_start:position].split("#")[0]
            depth -= 1
    return ""


def completions(text: str, offset: int, symbols: list[Symbol]) -> list[lsp.CompletionItem]:
    """Property keys first, then names in scope, keywords, values and units."""
    items = [lsp.CompletionItem(key, kind=lsp.CompletionItemKind.Property, detail=spec.doc or "property",
                                sort_text=f"0{key}") for key, spec in property_keys(text, offset).items()]
    seen = {i.label for i in items}
    for symbol in symbols:
        if symbol.name not in seen and symbol.kind not in ("rig", "sequence"):
            seen.add(symbol.name)
            items.append(lsp.CompletionItem(symbol.name, kind=_SYMBOL_COMPLETION_KIND[symbol.kind],
                                            detail=symbol.kind, sort_text=f"1{symbol.name}"))
    groups = ((KEYWORDS, lsp.CompletionItemKind.Keyword, "keyword", "2"),
              (CONSTANTS + FUNCTIONS, lsp.CompletionItemKind.EnumMember, "value", "3"),
              (tuple(units.UNITS), lsp.CompletionItemKind.Unit, "unit", "4"))
    for words, kind, detail, rank in groups:
        items += [lsp.CompletionItem(w, kind=kind, detail=detail, sort_text=f"{rank}{w}")
                  for w in words if w not in seen]
    return items


# ---- the outline ------------------------------------------------------------------------------
_OUTLINE_KIND = {
    "rig": lsp.SymbolKind.Module, "species": lsp.SymbolKind.Class, "drive": lsp.SymbolKind.Class,
    "port": lsp.SymbolKind.Interface, "constant": lsp.SymbolKind.Constant, "site": lsp.SymbolKind.Variable,
    "group": lsp.SymbolKind.Array, "block": lsp.SymbolKind.Function, "sequence": lsp.SymbolKind.Module,
    "parameter": lsp.SymbolKind.TypeParameter,
}


def outline(source: ast.SourceFile) -> list[lsp.DocumentSymbol]:
    """Top-level declarations, with the rig's declarations and a block's parameters inside them."""
    out = []
    for item in source.items:
        symbols = list(_declared_by(item))
        if not symbols:
            continue
        head, children = symbols[0], [s for s in symbols[1:] if s.kind != "constant" or s.scope is None]
        out.append(_document_symbol(head, [_document_symbol(c, []) for c in children]))
    return out


def _document_symbol(symbol: Symbol, children: list) -> lsp.DocumentSymbol:
    return lsp.DocumentSymbol(name=symbol.name, kind=_OUTLINE_KIND[symbol.kind], detail=symbol.kind,
                              range=lsp_range(symbol.node.span), selection_range=lsp_range(symbol.span),
                              children=children or None)


# ---- the server -----------------------------------------------------------------------------------
class SeqlangServer(LanguageServer):
    """Keeps one :class:`Analysis` per open document and answers requests from them."""

    def __init__(self):
        super().__init__("seqlang", __version__)
        self.analyses: dict[str, Analysis] = {}
        self.last_parsed: dict[str, ast.SourceFile] = {}  # for completion while the text does not parse
        self.pair_jobs = ThreadPoolExecutor(max_workers=1)
        self.pair_results: dict = {}

    def overlays(self) -> dict[str, str]:
        """Texts of every open document, by the path the resolver would form."""
        out = {}
        for uri, document in self.workspace.text_documents.items():
            path = to_fs_path(uri)
            if path:
                out[os.path.normpath(path)] = document.source
        return out

    def refresh(self, uri: str) -> None:
        """Re-analyse a document and publish its diagnostics."""
        path = os.path.normpath(to_fs_path(uri) or uri)
        text = self.workspace.get_text_document(uri).source
        analysis = analyse(path, text, self.overlays())
        self.analyses[path] = analysis
        if analysis.source is not None:
            self.last_parsed[path] = analysis.source
        self.text_document_publish_diagnostics(lsp.PublishDiagnosticsParams(uri, lsp_diagnostics(analysis)))

    def read(self, path: str) -> ast.SourceFile | None:
        """A file's syntax tree from its open buffer or from disk; None when it cannot be parsed."""
        text = self.overlays().get(path)
        try:
            if text is None:
                with open(path, encoding="utf-8") as handle:
                    text = handle.read()
            return parse_text(text, path)
        except (OSError, UnicodeDecodeError, SeqlangError):
            return None

    def context(self, uri: str):
        """The analysis of a document and the symbols of it, its rig and its imports."""
        analysis = self.analyses.get(os.path.normpath(to_fs_path(uri) or uri))
        if analysis is None or analysis.source is None:
            return analysis, []
        files = related_files(analysis.source, self.read)
        return analysis, [s for f in files for s in declared(f)]

    def text_of(self, span: Span) -> str:
        """The whole text of the file a span lies in."""
        if span.file in self.analyses:
            return self.analyses[span.file].text
        source = self.read(span.file)
        return source.text if source else ""

    def events_of(self, statement) -> list:
        """The played timeline events of one statement, from any checked open document."""
        for analysis in self.analyses.values():
            if analysis.checked is not None:
                events = [e for e in analysis.checked.quantized.events
                          if e.span.file == statement.span.file and e.span.start == statement.span.start]
                if events:
                    return events
        return []

    def program(self):
        """A checked program among the open documents, the current one preferred by the caller."""
        return next((a.checked.program for a in self.analyses.values() if a.checked), None)

    def interaction(self, program, site, other, distance: float) -> str:
        """`, V/h = ...` for two Rydberg-capable sites, computed once in the background."""
        sa, sb = program.rig.species[site.species], program.rig.species[other.species]
        if sa.rydberg is None or sb.rydberg is None:
            return ""
        key = (sa.data.name, sa.rydberg.label, sb.data.name, sb.rydberg.label)
        if key not in self.pair_results:
            from ..atoms import rydberg
            self.pair_results[key] = self.pair_jobs.submit(rydberg.c6_hz_m6, sa.data, sa.rydberg, sb.data, sb.rydberg)
        job = self.pair_results[key]
        try:
            c6 = job.result(timeout=INTERACTION_WAIT_S)
        except TimeoutError:
            return ", interaction: still being computed (hover again)"
        except Exception:
            return ", interaction: unavailable"
        from ..atoms import rydberg
        return f", V/h = {_q(rydberg.interaction_hz(c6, distance), units.FREQUENCY)}"


SERVER = SeqlangServer()


@SERVER.feature(lsp.TEXT_DOCUMENT_DID_OPEN)
def did_open(ls: SeqlangServer, params: lsp.DidOpenTextDocumentParams) -> None:
    ls.refresh(params.text_document.uri)


@SERVER.feature(lsp.TEXT_DOCUMENT_DID_CHANGE)
def did_change(ls: SeqlangServer, params: lsp.DidChangeTextDocumentParams) -> None:
    ls.refresh(params.text_document.uri)


@SERVER.feature(lsp.TEXT_DOCUMENT_DID_SAVE)
def did_save(ls: SeqlangServer, params: lsp.DidSaveTextDocumentParams) -> None:
    ls.refresh(params.text_document.uri)


@SERVER.feature(lsp.TEXT_DOCUMENT_DID_CLOSE)
def did_close(ls: SeqlangServer, params: lsp.DidCloseTextDocumentParams) -> None:
    ls.analyses.pop(os.path.normpath(to_fs_path(params.text_document.uri) or ""), None)
    ls.text_document_publish_diagnostics(lsp.PublishDiagnosticsParams(params.text_document.uri, []))


@SERVER.feature(lsp.TEXT_DOCUMENT_HOVER)
def hover(ls: SeqlangServer, params: lsp.HoverParams) -> lsp.Hover | None:
    analysis, symbol, offset = _under_cursor(ls, params)
    if analysis is None:
        return None
    parts = []
    pulse = statement_at(analysis.source, offset, ast.PulseStmt)
    events = ls.events_of(pulse) if pulse else []
    if events:
        parts.append(pulse_hover(events))
    if symbol is not None:
        parts.append(_symbol_hover(ls, symbol, analysis))
    return lsp.Hover(lsp.MarkupContent(lsp.MarkupKind.Markdown, "\n\n---\n\n".join(parts))) if parts else None


def _under_cursor(ls: SeqlangServer, params):
    """(analysis, the symbol under the cursor or None, offset); analysis is None for an unparsed file."""
    analysis, symbols = ls.context(params.text_document.uri)
    if analysis is None or analysis.source is None:
        return None, None, 0
    offset = offset_of(analysis.text, params.position)
    found = word_at(analysis.text, offset)
    return analysis, find_symbol(symbols, found[0], analysis.path, offset) if found else None, offset


def _symbol_hover(ls: SeqlangServer, symbol: Symbol, analysis: Analysis) -> str:
    program = analysis.checked.program if analysis.checked else ls.program()
    if program is not None and symbol.kind == "drive" and symbol.name in program.rig.drives:
        return drive_hover(program.rig.drives[symbol.name])
    if program is not None and symbol.kind == "site" and symbol.name in program.sites:
        return site_hover(program, symbol.name, ls.interaction)
    if symbol.kind == "constant":
        return constant_hover(symbol, program, ls.text_of)
    return plain_hover(symbol, ls.text_of)


@SERVER.feature(lsp.TEXT_DOCUMENT_DEFINITION)
def definition(ls: SeqlangServer, params: lsp.DefinitionParams) -> lsp.Location | None:
    _, symbol, _ = _under_cursor(ls, params)
    return lsp.Location(from_fs_path(symbol.span.file), lsp_range(symbol.span)) if symbol else None


@SERVER.feature(lsp.TEXT_DOCUMENT_REFERENCES)
def references(ls: SeqlangServer, params: lsp.ReferenceParams) -> list[lsp.Location]:
    analysis, symbols = ls.context(params.text_document.uri)
    if analysis is None or analysis.source is None:
        return []
    found = word_at(analysis.text, offset_of(analysis.text, params.position))
    if not found or not any(s.name == found[0] for s in symbols):
        return []
    files = related_files(analysis.source, ls.read)
    files += [a.source for a in ls.analyses.values() if a.source and a.source.path not in {f.path for f in files}]
    return [loc for f in files for loc in _occurrences(f, found[0])]


def _occurrences(source: ast.SourceFile, name: str) -> Iterator[lsp.Location]:
    from pygments.token import Name
    from .lexer import SeqlangLexer
    starts = [0]
    for line in source.text.split("\n"):  # lines as the parser counts them
        starts.append(starts[-1] + len(line) + 1)
    for offset, token, value in SeqlangLexer(stripnl=False, ensurenl=False).get_tokens_unprocessed(source.text):
        if value == name and token in Name:
            line = max(i for i, s in enumerate(starts) if s <= offset)
            column = offset - starts[line]
            yield lsp.Location(from_fs_path(source.path), lsp.Range(lsp.Position(line, column),
                                                                   lsp.Position(line, column + len(name))))


@SERVER.feature(lsp.TEXT_DOCUMENT_COMPLETION, lsp.CompletionOptions(trigger_characters=[" "]))
def completion(ls: SeqlangServer, params: lsp.CompletionParams) -> lsp.CompletionList:
    path = os.path.normpath(to_fs_path(params.text_document.uri) or "")
    text = normalise(ls.workspace.get_text_document(params.text_document.uri).source)
    source = ls.last_parsed.get(path)
    symbols = [s for f in related_files(source, ls.read) for s in declared(f)] if source else []
    items = completions(text, offset_of(text, params.position), symbols)
    return lsp.CompletionList(is_incomplete=False, items=items)


@SERVER.feature(lsp.TEXT_DOCUMENT_DOCUMENT_SYMBOL)
def document_symbol(ls: SeqlangServer, params: lsp.DocumentSymbolParams) -> list[lsp.DocumentSymbol]:
    analysis, _ = ls.context(params.text_document.uri)
    return outline(analysis.source) if analysis and analysis.source else []


def serve() -> None:
    """Run the server on stdin/stdout."""
    SERVER.start_io()
