"""What the server shows: hover texts and the outline.

Each function reads the syntax tree or the checked program and returns Markdown
(hover) or LSP document symbols (outline); none reads files or runs checks.
"""
from __future__ import annotations

import math
from typing import Callable, Iterator

from lsprotocol import types as lsp

from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import Span
from .analysis import Symbol, declared_by
from .completion import signature
from .formatter import expression
from .positions import UTF16, span_range


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


def block_call_hover(block: ast.BlockDef | None, call: ast.DoStmt, program, text_of) -> str:
    """A `do` statement: the block's signature and how long its expansion lasts here."""
    head = f"**do** `{signature(block, text_of)}`" if block else f"**do** `{call.block.name}(…)`"
    if program is None:
        return head
    from ..compile.lower import duration_of
    expansions = list(_expansions(program.body, call.span, 1))
    if not expansions:
        return head
    op, times = expansions[0]
    total = sum(t for _, t in expansions)
    lines = [head, f"- expansion lasts {_q(duration_of(op), units.DURATION)} (before tick rounding)"]
    if total > 1:
        lines.append(f"- played {total} times")
    return "\n".join(lines)


def _expansions(op, span: Span, times: int) -> Iterator[tuple[object, int]]:
    """The operations a `do` at `span` expanded to, with how often each is played."""
    from ..program.model import RepeatOp, SerialOp, TogetherOp
    if isinstance(op, SerialOp) and op.span.file == span.file and op.span.start == span.start \
            and op.span.end == span.end:
        yield op, times
    if isinstance(op, RepeatOp):
        yield from _expansions(op.body, span, times * op.count)
    elif isinstance(op, (SerialOp, TogetherOp)):
        for child in op.body:
            yield from _expansions(child, span, times)


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
        return f"**block** `{signature(node, text_of)}`"
    if isinstance(node, ast.GroupStmt):
        return f"**group** `{node.name.name}` = {', '.join(m.name for m in node.members)}"
    if isinstance(node, ast.SpeciesDecl):
        return f"**species** `{node.name.name}` = {node.isotope.name}"
    if isinstance(node, ast.PortDecl):
        return f"**port** `{node.name.name}` = {node.channel.text}"
    if isinstance(node, ast.Param):
        return f"**parameter** `{node.name.name}`"
    return f"**{symbol.kind}** `{symbol.name}`"


STALE_NOTE = "*(from the last version of this file that checked; it has errors now)*"


# ---- the outline ------------------------------------------------------------------------------
_OUTLINE_KIND = {
    "rig": lsp.SymbolKind.Module, "species": lsp.SymbolKind.Class, "drive": lsp.SymbolKind.Class,
    "port": lsp.SymbolKind.Interface, "constant": lsp.SymbolKind.Constant, "site": lsp.SymbolKind.Variable,
    "group": lsp.SymbolKind.Array, "block": lsp.SymbolKind.Function, "sequence": lsp.SymbolKind.Module,
    "parameter": lsp.SymbolKind.TypeParameter,
}


def outline(source: ast.SourceFile, encoding: str = UTF16) -> list[lsp.DocumentSymbol]:
    """Top-level declarations, with the rig's declarations and a block's parameters inside them."""
    out = []
    for item in source.items:
        symbols = list(declared_by(item))
        if not symbols:
            continue
        head, children = symbols[0], [s for s in symbols[1:] if s.kind != "constant" or s.scope is None]
        inner = [_document_symbol(c, [], source.text, encoding) for c in children]
        out.append(_document_symbol(head, inner, source.text, encoding))
    return out


def _document_symbol(symbol: Symbol, children: list, text: str, encoding: str) -> lsp.DocumentSymbol:
    return lsp.DocumentSymbol(name=symbol.name, kind=_OUTLINE_KIND[symbol.kind], detail=symbol.kind,
                              range=span_range(symbol.node.span, text, encoding),
                              selection_range=span_range(symbol.span, text, encoding), children=children or None)
