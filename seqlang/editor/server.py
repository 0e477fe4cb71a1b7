"""`seqlang lsp`: a Language Server Protocol server over stdio.

Diagnostics come from the same checker as ``seqlang check`` (unsaved buffers
are handed to it as text overlays). Checking and formatting run in budgeted
worker processes (:mod:`.worker`), so a program that is slow or huge to check
never stops the server from answering; hover, completion, definitions and the
outline are answered from the last analysis of each document, and from the
last one that checked when the text has errors now (marked stale).
"""
from __future__ import annotations

import asyncio
import os
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from typing import Callable, Iterator

from lsprotocol import types as lsp
from pygls.exceptions import JsonRpcException, JsonRpcInvalidParams
from pygls.lsp.server import LanguageServer
from pygls.uris import from_fs_path, to_fs_path

from .. import __version__
from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import Diagnostic, Span, render, warning
from ..lang.source_text import normalise
from . import worker as jobs
from .actions import code_action, fixes_for
from .analysis import Analysis, Symbol, find_symbol, relative_path, statement_at, word_at
from .completion import Names, completion_items
from .positions import UTF16, line_starts, map_offset, offset_of, position_of, span_range
from .views import STALE_NOTE, block_call_hover, constant_hover, drive_hover, outline, plain_hover, \
    pulse_hover, site_hover
from .transport import GuardedProtocol, GuardedReader

MAX_DOCUMENT_CHARS = 4 * 1024 * 1024  # a larger document is not checked (hover and outline stay off)
MAX_REFERENCE_CHARS = 1024 * 1024  # files searched for references (the search lexes them whole)
DEBOUNCE_S = 0.15  # edits closer together than this are checked once
INTERACTION_WAIT_S = 2.0  # how long a hover waits for a pair interaction before saying "computing"
REQUEST_FAILED = -32803  # LSP 3.17: the request was well formed but could not be carried out


# ---- diagnostics in LSP terms -----------------------------------------------------
def lsp_diagnostics(analysis: Analysis, encoding: str = UTF16) -> list[tuple[lsp.Diagnostic, Diagnostic]]:
    """The analysis's diagnostics, each beside its own; those in other files are shown at the
    `use`/`import` line."""
    out = []
    for diag in analysis.diagnostics:
        message = diag.message + (f"\nhint: {diag.hint}" if diag.hint else "")
        span = diag.span
        if span.file != analysis.path:
            message = f"in {span.label()}: {message}"
            span = _inclusion_span(analysis, span.file)
        severity = lsp.DiagnosticSeverity.Error if diag.is_error else lsp.DiagnosticSeverity.Warning
        shown = span_range(span, analysis.text, encoding)
        out.append((lsp.Diagnostic(shown, message, severity=severity, source="seqlang"), diag))
    return out


def _inclusion_span(analysis: Analysis, other: str) -> Span:
    inclusions = [i for i in (analysis.source.items if analysis.source else ())
                  if isinstance(i, (ast.UseStmt, ast.ImportStmt))]
    for item in inclusions:
        if relative_path(analysis.path, item.path) == other:
            return item.span
    return inclusions[0].span if inclusions else Span(analysis.path, 1, 1, 1, 1)


def budget_diagnostic(path: str, outcome: jobs.Outcome, budget: jobs.Budget) -> Diagnostic:
    """Why a check did not finish, as a warning at the top of the file."""
    hint = {jobs.TIMEOUT: "run `seqlang check` on the command line, or raise SEQLANG_LSP_CHECK_SECONDS",
            jobs.MEMORY: "run `seqlang check` on the command line, or raise SEQLANG_LSP_MEMORY_MB"}
    return warning(f"not checked: {why_stopped(outcome, budget, 'checking')}", Span(path, 1, 1, 1, 1),
                   hint.get(outcome.status))


def why_stopped(outcome: jobs.Outcome, budget: jobs.Budget, what: str) -> str:
    """Words for a worker job that did not finish."""
    if outcome.status == jobs.TIMEOUT:
        return f"{what} took longer than the editor's budget of {budget.seconds:g} s"
    if outcome.status == jobs.MEMORY:
        return f"{what} needed more than the editor's budget of {budget.memory_mb} MiB"
    return f"the worker stopped unexpectedly ({outcome.detail}); this is a bug in seqlang {__version__}"


# ---- checking in the background ------------------------------------------------------------------
class Checker:
    """Checks edited documents one at a time in a budgeted worker; a newer edit of the
    document being checked cancels that check."""

    def __init__(self, server: "SeqlangServer", budget: jobs.Budget):
        self.server = server
        self.worker = jobs.Worker(budget)
        self.pending: dict[str, float] = {}  # uri -> when it was last edited
        self.running: str | None = None
        self.wake = threading.Condition()
        self.closed = False
        threading.Thread(target=self._loop, name="seqlang-checker", daemon=True).start()

    def schedule(self, uri: str) -> None:
        with self.wake:
            self.pending.pop(uri, None)
            self.pending[uri] = time.monotonic()
            if self.running == uri:
                self.worker.cancel()  # the text it checks is already stale
                self.server.log(f"seqlang: cancelled the check of {uri}: the document changed")
            self.wake.notify()

    def close(self) -> None:
        with self.wake:
            self.closed = True
            self.wake.notify()
        self.worker.close()

    def _loop(self) -> None:
        while True:
            uri = self._next()
            if uri is None:
                return
            snapshot = self.server.snapshot(uri)
            outcome = self.worker.run("analyse", *snapshot) if snapshot else None
            with self.wake:
                self.running = None
            if outcome is not None and outcome.status != jobs.CANCELLED:
                self.server.from_worker(uri, snapshot[1], outcome)

    def _next(self) -> str | None:
        with self.wake:
            while True:
                if self.closed:
                    return None
                if self.pending:
                    uri, edited = next(iter(self.pending.items()))
                    wait = edited + DEBOUNCE_S - time.monotonic()
                    if wait <= 0:
                        del self.pending[uri]
                        self.running = uri
                        return uri
                    self.wake.wait(wait)
                else:
                    self.wake.wait()


# ---- the server -----------------------------------------------------------------------------------
class SeqlangServer(LanguageServer):
    """Keeps the analyses of the open documents and answers requests from them."""

    def __init__(self):
        super().__init__("seqlang", __version__, protocol_cls=GuardedProtocol)
        self.budget = jobs.Budget.from_environment()
        self.analyses: dict[str, Analysis] = {}  # the latest analysis of each open document
        self.last_good: dict[str, Analysis] = {}  # the latest one that checked
        self.last_parsed: dict[str, Analysis] = {}  # the latest one that parsed
        self.published: dict[str, list[tuple[lsp.Diagnostic, Diagnostic]]] = {}
        self.checker: Checker | None = None
        self.formatter = jobs.Worker(self.budget)
        self.event_loop: asyncio.AbstractEventLoop | None = None
        self.pair_jobs = ThreadPoolExecutor(max_workers=1)
        self.pair_results: dict = {}

    # ---- documents ----------------------------------------------------------------
    def document(self, uri: str):
        """An open document; a request about any other is refused (nothing is read from disk)."""
        document = self.workspace.text_documents.get(uri)
        if document is None:
            raise JsonRpcInvalidParams(f"the document {uri} is not open (send textDocument/didOpen first)")
        return document

    def text(self, uri: str) -> str:
        """An open document's text as the parser counts it (CR LF and CR made LF): analyses,
        offsets and positions all refer to it; its line numbers are the client's."""
        return normalise(self.document(uri).source)

    @property
    def encoding(self) -> str:
        """The position encoding agreed with the client (UTF-16 unless it offered another)."""
        try:
            chosen = self.workspace.position_encoding
        except RuntimeError:  # before `initialize`
            chosen = None
        return str(getattr(chosen, "value", chosen) or UTF16)

    @staticmethod
    def path_of(uri: str) -> str:
        return os.path.normpath(to_fs_path(uri) or uri)

    def overlays(self) -> dict[str, str]:
        """Texts of every open document, by the path the resolver would form."""
        return {self.path_of(uri): normalise(d.source) for uri, d in list(self.workspace.text_documents.items())
                if len(d.source) <= MAX_DOCUMENT_CHARS}

    def snapshot(self, uri: str) -> tuple[str, str, dict] | None:
        """(path, text, overlays) for a check, taken when the check starts."""
        document = self.workspace.text_documents.get(uri)
        if document is None:
            return None
        return self.path_of(uri), normalise(document.source), self.overlays()

    def edited(self, uri: str) -> None:
        """A document was opened, changed or saved: check it and the open documents that include it."""
        text = self.text(uri)
        path = self.path_of(uri)
        if len(text) > MAX_DOCUMENT_CHARS:
            message = (f"not checked: this document has {len(text):,} characters, more than the editor's "
                       f"limit of {MAX_DOCUMENT_CHARS:,}")
            self.accept(uri, Analysis(path, text, None, None, (warning(message, Span(path, 1, 1, 1, 1)),)))
            return
        if self.checker is None:
            self.checker = Checker(self, self.budget)
            threading.Thread(target=self.formatter.start, daemon=True).start()  # warm, for format-on-save
        self.checker.schedule(uri)
        self.recheck_dependents(uri)

    def recheck_dependents(self, uri: str) -> None:
        """Re-check the open documents that `use` or `import` this one."""
        path = self.path_of(uri)
        for other_uri in list(self.workspace.text_documents):
            other = self.analyses.get(self.path_of(other_uri))
            if other_uri != uri and other is not None and path in other.depends_on and self.checker:
                self.checker.schedule(other_uri)

    def from_worker(self, uri: str, text: str, outcome: jobs.Outcome) -> None:
        """Called on the checker's thread: hand the result to the server's own loop."""
        path = self.path_of(uri)
        if outcome.status == jobs.OK:
            analysis = outcome.value
        else:
            analysis = Analysis(path, text, None, None, (budget_diagnostic(path, outcome, self.budget),))
        if self.event_loop is not None:
            self.event_loop.call_soon_threadsafe(self._accept_if_current, uri, analysis)

    def _accept_if_current(self, uri: str, analysis: Analysis) -> None:
        document = self.workspace.text_documents.get(uri)
        if document is not None and normalise(document.source) == analysis.text:
            self.accept(uri, analysis)

    def accept(self, uri: str, analysis: Analysis) -> None:
        """Keep a new analysis of an open document and publish its diagnostics."""
        self.analyses[analysis.path] = analysis
        if analysis.source is not None:
            self.last_parsed[analysis.path] = analysis
        if analysis.checked is not None:
            self.last_good[analysis.path] = analysis
        pairs = lsp_diagnostics(analysis, self.encoding)
        self.published[analysis.path] = pairs
        self.text_document_publish_diagnostics(lsp.PublishDiagnosticsParams(uri, [d for d, _ in pairs]))

    def forget(self, uri: str) -> None:
        path = self.path_of(uri)
        for table in (self.analyses, self.last_good, self.last_parsed, self.published):
            table.pop(path, None)

    def shutdown(self):
        if self.checker is not None:
            self.checker.close()
        self.formatter.close()
        super().shutdown()

    # ---- what requests read ----------------------------------------------------------
    def parsed(self, path: str) -> Analysis | None:
        """The latest analysis of a document that has a syntax tree."""
        return self.last_parsed.get(path)

    def for_hover(self, uri: str, offset: int) -> tuple[Analysis, int, bool] | None:
        """The analysis to answer from, the cursor in its text, and whether it is stale: the
        current one when it checked, else the last one that checked where the cursor's line is
        unchanged (stale), else the last one that parsed."""
        path, text = self.path_of(uri), self.text(uri)
        current = self.analyses.get(path)
        good = self.last_good.get(path)
        if good is not None and (current is None or current.checked is None or current.text != text):
            mapped = map_offset(text, good.text, offset)
            if mapped is not None:
                return good, mapped, good is not current
        parsed = self.parsed(path)
        if parsed is not None:
            mapped = map_offset(text, parsed.text, offset)
            if mapped is not None:
                return parsed, mapped, False
        return None

    def texts(self, analysis: Analysis) -> dict[str, str]:
        out = {f.path: f.text for f in analysis.files}
        out.update({a.path: a.text for a in self.last_parsed.values()})
        return out

    def events_of(self, statement, preferred: Analysis) -> list:
        """The played events of one statement, from this analysis or any checked open document
        (a pulse inside an imported block is played by the files that import it)."""
        key = (statement.span.file, statement.span.start)
        for analysis in [preferred] + list(self.last_good.values()):
            events = analysis.events_by_statement.get(key) if analysis.checked else None
            if events:
                return events
        return []

    def program_for(self, analysis: Analysis):
        """The checked program of this analysis, else of any open document that checked."""
        if analysis.checked is not None:
            return analysis.checked.program
        return next((a.checked.program for a in self.last_good.values()), None)

    def pair_job(self, program, site, other):
        """The background computation of C6 for two Rydberg-capable sites' species, or None."""
        sa, sb = program.rig.species[site.species], program.rig.species[other.species]
        if sa.rydberg is None or sb.rydberg is None:
            return None
        key = (sa.data.name, sa.rydberg.label, sb.data.name, sb.rydberg.label)
        if key not in self.pair_results:
            from ..atoms import rydberg
            self.pair_results[key] = self.pair_jobs.submit(rydberg.c6_hz_m6, sa.data, sa.rydberg, sb.data, sb.rydberg)
        return self.pair_results[key]

    async def wait_for_pairs(self, program, name: str) -> None:
        """Give the interactions of a site's neighbours a moment (the loop keeps serving meanwhile)."""
        site = program.sites[name]
        waiting = [job for other in program.sites.values() if other.name != name
                   for job in [self.pair_job(program, site, other)] if job is not None and not job.done()]
        if waiting:
            await asyncio.wait([asyncio.wrap_future(j) for j in waiting], timeout=INTERACTION_WAIT_S)

    def interaction(self, program, site, other, distance: float) -> str:
        """`, V/h = ...` for two Rydberg-capable sites, once computed in the background."""
        job = self.pair_job(program, site, other)
        if job is None:
            return ""
        if not job.done():
            return ", interaction: still being computed (hover again)"
        try:
            c6 = job.result()
        except Exception:
            return ", interaction: unavailable"
        from ..atoms import rydberg
        return f", V/h = {units.format_quantity(rydberg.interaction_hz(c6, distance), units.FREQUENCY)}"

    # ---- the stdio loop, with the guarded reader -------------------------------------------
    def start_io(self, stdin=None, stdout=None):
        """Serve on stdin/stdout; oversized messages are refused, not read."""
        import sys
        from pygls import io_
        from pygls.server import logger
        self._stop_event = threading.Event()
        reader = GuardedReader(stdin or sys.stdin.buffer, self.thread_pool, self._refused)
        self.protocol.set_writer(io_.StdoutWriter(stdout or sys.stdout.buffer))

        async def serve_messages():
            self.event_loop = asyncio.get_running_loop()
            await io_.run_async(stop_event=self._stop_event, reader=reader, protocol=self.protocol,
                                logger=logger, error_handler=self.report_server_error)
        try:
            asyncio.run(serve_messages())
        except BrokenPipeError:
            logger.error("Connection to the client is lost! Shutting down the server.")
        except (KeyboardInterrupt, SystemExit):
            pass
        finally:
            self.shutdown()

    def log(self, message: str, kind: lsp.MessageType = lsp.MessageType.Log) -> None:
        """A line in the client's log of this server (from the server's own loop)."""
        self.protocol.notify(lsp.WINDOW_LOG_MESSAGE, lsp.LogMessageParams(kind, message))

    def _refused(self, size: int) -> None:
        # Called on the reader's thread: hand the notice to the loop.
        from .transport import MAX_MESSAGE_BYTES
        message = (f"seqlang: refused a message of {size:,} bytes (the limit is {MAX_MESSAGE_BYTES:,}); "
                   "it was skipped")
        self.event_loop.call_soon_threadsafe(self.log, message, lsp.MessageType.Error)


SERVER = SeqlangServer()


# ---- document notifications ----------------------------------------------------------------------
@SERVER.feature(lsp.TEXT_DOCUMENT_DID_OPEN)
def did_open(ls: SeqlangServer, params: lsp.DidOpenTextDocumentParams) -> None:
    ls.edited(params.text_document.uri)


@SERVER.feature(lsp.TEXT_DOCUMENT_DID_CHANGE)
def did_change(ls: SeqlangServer, params: lsp.DidChangeTextDocumentParams) -> None:
    ls.edited(params.text_document.uri)


@SERVER.feature(lsp.TEXT_DOCUMENT_DID_SAVE)
def did_save(ls: SeqlangServer, params: lsp.DidSaveTextDocumentParams) -> None:
    ls.edited(params.text_document.uri)


@SERVER.feature(lsp.TEXT_DOCUMENT_DID_CLOSE)
def did_close(ls: SeqlangServer, params: lsp.DidCloseTextDocumentParams) -> None:
    ls.forget(params.text_document.uri)
    ls.recheck_dependents(params.text_document.uri)  # they now read the file from disk
    ls.text_document_publish_diagnostics(lsp.PublishDiagnosticsParams(params.text_document.uri, []))


# ---- hover, definition, references ------------------------------------------------------------------
def _cursor(ls: SeqlangServer, params) -> tuple[Analysis, Symbol | None, int, bool] | None:
    """(the analysis to answer from, the symbol under the cursor or None, the cursor in its
    text, whether the analysis is of an older text)."""
    text = ls.text(params.text_document.uri)
    found = ls.for_hover(params.text_document.uri, offset_of(text, params.position, ls.encoding))
    if found is None:
        return None
    analysis, offset, stale = found
    word = word_at(analysis.text, offset)
    symbol = find_symbol(analysis.symbols, word[0], analysis.path, offset) if word else None
    return analysis, symbol, offset, stale


@SERVER.feature(lsp.TEXT_DOCUMENT_HOVER)
async def hover(ls: SeqlangServer, params: lsp.HoverParams) -> lsp.Hover | None:
    found = _cursor(ls, params)
    if found is None:
        return None
    analysis, symbol, offset, stale = found
    program = ls.program_for(analysis)
    if symbol is not None and symbol.kind == "site" and program is not None and symbol.name in program.sites:
        await ls.wait_for_pairs(program, symbol.name)
    text_of = _text_lookup(ls, analysis)
    parts = []
    pulse = statement_at(analysis.source, offset, ast.PulseStmt)
    events = ls.events_of(pulse, analysis) if pulse else []
    if events:
        parts.append(pulse_hover(events))
    call = statement_at(analysis.source, offset, ast.DoStmt)
    if call is not None and call.block.span.start <= offset <= call.block.span.end:
        block = next((s.node for s in analysis.symbols if s.kind == "block" and s.name == call.block.name), None)
        parts.append(block_call_hover(block, call, ls.program_for(analysis) if analysis.checked else None, text_of))
    elif symbol is not None:
        parts.append(_symbol_hover(ls, symbol, analysis, text_of))
    if parts and stale:
        parts.append(STALE_NOTE)
    return lsp.Hover(lsp.MarkupContent(lsp.MarkupKind.Markdown, "\n\n---\n\n".join(parts))) if parts else None


def _text_lookup(ls: SeqlangServer, analysis: Analysis) -> Callable[[Span], str]:
    texts = ls.texts(analysis)
    texts[analysis.path] = analysis.text
    return lambda span: texts.get(span.file, "")


def _symbol_hover(ls: SeqlangServer, symbol: Symbol, analysis: Analysis, text_of) -> str:
    program = ls.program_for(analysis)
    if program is not None and symbol.kind == "drive" and symbol.name in program.rig.drives:
        return drive_hover(program.rig.drives[symbol.name])
    if program is not None and symbol.kind == "site" and symbol.name in program.sites:
        return site_hover(program, symbol.name, ls.interaction)
    if symbol.kind == "constant":
        return constant_hover(symbol, program, text_of)
    return plain_hover(symbol, text_of)


@SERVER.feature(lsp.TEXT_DOCUMENT_DEFINITION)
def definition(ls: SeqlangServer, params: lsp.DefinitionParams) -> lsp.Location | None:
    found = _cursor(ls, params)
    if found is None or found[1] is None:
        return None
    symbol = found[1]
    text = _text_lookup(ls, found[0])(symbol.span) or None
    return lsp.Location(from_fs_path(symbol.span.file), span_range(symbol.span, text, ls.encoding))


@SERVER.feature(lsp.TEXT_DOCUMENT_REFERENCES)
def references(ls: SeqlangServer, params: lsp.ReferenceParams) -> list[lsp.Location]:
    found = _cursor(ls, params)
    if found is None or found[1] is None:
        return []
    analysis, symbol = found[:2]
    files = {f.path: f for f in analysis.files}
    for other in ls.last_parsed.values():
        files.setdefault(other.path, other.source)
    large = [path for path, f in files.items() if len(f.text) > MAX_REFERENCE_CHARS]
    if large:
        ls.log(f"seqlang: references not searched in {', '.join(large)} (over {MAX_REFERENCE_CHARS:,} characters)")
    return [loc for f in files.values() if len(f.text) <= MAX_REFERENCE_CHARS
            for loc in _occurrences(f, symbol.name, ls.encoding)]


def _occurrences(source: ast.SourceFile, name: str, encoding: str) -> Iterator[lsp.Location]:
    from pygments.token import Name
    from .lexer import SeqlangLexer
    uri = from_fs_path(source.path)
    for offset, token, value in SeqlangLexer(stripnl=False, ensurenl=False).get_tokens_unprocessed(source.text):
        if value == name and token in Name:
            yield lsp.Location(uri, lsp.Range(position_of(source.text, offset, encoding),
                                              position_of(source.text, offset + len(name), encoding)))


# ---- completion and signature help ------------------------------------------------------------------
@SERVER.feature(lsp.TEXT_DOCUMENT_COMPLETION, lsp.CompletionOptions(trigger_characters=[" ", ",", "("]))
def completion(ls: SeqlangServer, params: lsp.CompletionParams) -> lsp.CompletionList:
    path, text = ls.path_of(params.text_document.uri), ls.text(params.text_document.uri)
    offset = offset_of(text, params.position, ls.encoding)
    parsed = ls.parsed(path)
    symbols = tuple(parsed.symbols) if parsed else ()
    texts = ls.texts(parsed) if parsed else {}
    names = Names(symbols, texts, path, map_offset(text, parsed.text, offset) or offset if parsed else offset)
    return lsp.CompletionList(is_incomplete=False, items=completion_items(text, offset, names))


@SERVER.feature(lsp.TEXT_DOCUMENT_SIGNATURE_HELP, lsp.SignatureHelpOptions(trigger_characters=["(", ","]))
def signature_help(ls: SeqlangServer, params: lsp.SignatureHelpParams) -> lsp.SignatureHelp | None:
    from .signatures import call_at, signature_information
    text = ls.text(params.text_document.uri)
    call = call_at(text, offset_of(text, params.position, ls.encoding))
    parsed = ls.parsed(ls.path_of(params.text_document.uri))
    if call is None or parsed is None:
        return None
    name, active = call
    block = next((s.node for s in parsed.symbols if s.kind == "block" and s.name == name), None)
    if block is None:
        return None
    information, index = signature_information(block, active, _text_lookup(ls, parsed))
    return lsp.SignatureHelp([information], active_signature=0, active_parameter=index)


# ---- formatting -------------------------------------------------------------------------------------
async def _format(ls: SeqlangServer, uri: str, job: str, *extra) -> list[lsp.TextEdit]:
    text = ls.text(uri)
    if len(text) > MAX_DOCUMENT_CHARS:
        raise JsonRpcException(f"not formatted: the document is larger than {MAX_DOCUMENT_CHARS:,} characters",
                               code=REQUEST_FAILED)
    path = ls.path_of(uri)
    outcome = await asyncio.get_running_loop().run_in_executor(None, ls.formatter.run, job, text, path, *extra)
    if outcome.status != jobs.OK:
        raise JsonRpcException(f"not formatted: {why_stopped(outcome, ls.budget, 'formatting')}",
                               code=REQUEST_FAILED)
    edits, refusal = outcome.value
    if edits is None:
        raise JsonRpcException("not formatted: " + render(refusal[0]).splitlines()[0], code=REQUEST_FAILED)
    return [lsp.TextEdit(_line_range(text, first, last, ls.encoding), new) for first, last, new in edits]


def _line_range(text: str, first: int, last: int, encoding: str) -> lsp.Range:
    starts = line_starts(text)
    offset = lambda line: starts[line] if line < len(starts) else len(text)  # noqa: E731
    return lsp.Range(position_of(text, offset(first), encoding), position_of(text, offset(last), encoding))


@SERVER.feature(lsp.TEXT_DOCUMENT_FORMATTING)
async def formatting(ls: SeqlangServer, params: lsp.DocumentFormattingParams) -> list[lsp.TextEdit]:
    return await _format(ls, params.text_document.uri, "format")


@SERVER.feature(lsp.TEXT_DOCUMENT_RANGE_FORMATTING)
async def range_formatting(ls: SeqlangServer, params: lsp.DocumentRangeFormattingParams) -> list[lsp.TextEdit]:
    last = params.range.end.line - (1 if params.range.end.character == 0 and
                                    params.range.end.line > params.range.start.line else 0)
    return await _format(ls, params.text_document.uri, "format_range", params.range.start.line, last)


# ---- quick fixes and the outline ------------------------------------------------------------------------
@SERVER.feature(lsp.TEXT_DOCUMENT_CODE_ACTION,
                lsp.CodeActionOptions(code_action_kinds=[lsp.CodeActionKind.QuickFix]))
def code_actions(ls: SeqlangServer, params: lsp.CodeActionParams) -> list[lsp.CodeAction]:
    uri = params.text_document.uri
    text = ls.text(uri)
    path = ls.path_of(uri)
    open_paths = [ls.path_of(u) for u in ls.workspace.text_documents]
    out = []
    for shown, diagnostic in ls.published.get(path, []):
        if _overlaps(shown.range, params.range):
            out += [code_action(fix, uri, shown) for fix in fixes_for(diagnostic, shown.range, path, text, open_paths)]
    return out


def _overlaps(a: lsp.Range, b: lsp.Range) -> bool:
    key = lambda p: (p.line, p.character)  # noqa: E731
    return key(a.start) <= key(b.end) and key(b.start) <= key(a.end)


@SERVER.feature(lsp.TEXT_DOCUMENT_DOCUMENT_SYMBOL)
def document_symbol(ls: SeqlangServer, params: lsp.DocumentSymbolParams) -> list[lsp.DocumentSymbol]:
    ls.document(params.text_document.uri)
    parsed = ls.parsed(ls.path_of(params.text_document.uri))
    return outline(parsed.source, ls.encoding) if parsed else []


def serve() -> None:
    """Run the server on stdin/stdout."""
    SERVER.start_io()
