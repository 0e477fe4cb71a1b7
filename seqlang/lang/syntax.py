"""Syntax tree: what the user wrote, one frozen dataclass per construct.

Every node carries its :class:`~seqlang.lang.diagnostics.Span`. Nothing here is
checked yet: names, units and kinds of values are the resolver's job. Nodes have
``__slots__`` (``@node``): a generated program has millions of them, and a node
without a ``__dict__`` takes a third of the memory.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Union

from .diagnostics import Span
from .records import direct_init


def node(cls):
    """A syntax node: a frozen slotted dataclass with a direct ``__init__`` (records.direct_init)."""
    return direct_init(dataclass(frozen=True, slots=True)(cls))


def _leading(span: Span, width: int) -> Span:
    """The first `width` characters of `span` (a token on its first line)."""
    return Span(span.file, span.line, span.column, span.line, span.column + width, span.start, span.start + width)


@node
class Ident:
    """A name as written, with where it was written."""

    name: str
    span: Span


# ---- expressions ----------------------------------------------------------
@node
class Number:
    """A literal number."""

    value: float
    span: Span


@node
class UnitRef:
    """A bare unit used as a value, e.g. ``pi`` in ``pi/2``."""

    unit: str
    span: Span


@node
class NameRef:
    """A reference to a constant, parameter or keyword value (``all``, ``clock``)."""

    name: str
    span: Span


@node
class WithUnit:
    """An expression followed by a unit: ``22 kHz``, ``(0, 5) um``."""

    operand: "Expr"
    unit: str
    span: Span

    @property
    def unit_span(self) -> Span:
        """Where the unit is written: the last token, on the span's last line (derived, not stored)."""
        s, width = self.span, len(self.unit)
        return Span(s.file, s.end_line, s.end_column - width, s.end_line, s.end_column, s.end - width, s.end)


@node
class BinOp:
    """``left op right`` for op in + - * / ^."""

    op: str
    left: "Expr"
    right: "Expr"
    span: Span


@node
class Neg:
    """Unary minus."""

    operand: "Expr"
    span: Span


@node
class Arg:
    """A call or ``do`` argument, positional (name None) or by keyword."""

    name: Ident | None
    value: "Expr"
    span: Span


@node
class Call:
    """``name(args)``: a function such as ``sqrt`` or an envelope such as ``gaussian``."""

    func: Ident
    args: tuple[Arg, ...]
    span: Span


@node
class TupleExpr:
    """``(a, b, c)``, for coordinates."""

    items: tuple["Expr", ...]
    span: Span


@node
class RangeExpr:
    """``lo .. hi``."""

    low: "Expr"
    high: "Expr"
    span: Span


@node
class LevelExpr:
    """A Rydberg level written as ``58S1/2``."""

    text: str
    span: Span


@node
class ChannelExpr:
    """A sequencer output written as ``awg1.2`` or ``ttl.4``."""

    text: str
    span: Span


@node
class StatePair:
    """``(F=1, mF=0) <-> (F=2, mF=0)``: an explicit hyperfine qubit."""

    lower: tuple[tuple[Ident, "Expr"], ...]
    upper: tuple[tuple[Ident, "Expr"], ...]
    span: Span


@dataclass(frozen=True)
class RecordSel:
    """``mid[h1, h2]``: some sites of an image record (sites may name groups)."""

    record: Ident
    sites: tuple[Ident, ...]
    span: Span


Expr = Union[Number, UnitRef, NameRef, WithUnit, BinOp, Neg, Call, TupleExpr,
             RangeExpr, LevelExpr, ChannelExpr, StatePair, RecordSel]


@node
class Prop:
    """``key value`` inside braces or after a statement.

    The key's own span is not stored: the key is the property's first token, a name on
    one line, so its span is the start of the property's (a generated program has a
    few properties per line, and two spans per property was a fifth of its tree)."""

    key_name: str
    value: Expr
    span: Span

    @property
    def key(self) -> Ident:
        """The key as written, with its span."""
        return Ident(self.key_name, _leading(self.span, len(self.key_name)))


# ---- the rig --------------------------------------------------------------
@node
class SpeciesDecl:
    """``species na = Na23 { ... }``."""

    name: Ident
    isotope: Ident
    props: tuple[Prop, ...]
    span: Span


@node
class DriveDecl:
    """``drive ryd_na rydberg na { ... }``."""

    name: Ident
    kind: Ident
    species: Ident
    props: tuple[Prop, ...]
    span: Span


@node
class ImageDecl:
    """``image cs { ... }``: the imaging of one species."""

    species: Ident
    props: tuple[Prop, ...]
    span: Span


@node
class PortDecl:
    """``port shutter = ttl.7 { ... }``: a plain lab output."""

    name: Ident
    channel: ChannelExpr
    props: tuple[Prop, ...]
    span: Span


@node
class LetStmt:
    """``let name = expr``."""

    name: Ident
    value: Expr
    span: Span


@node
class RigDef:
    """``rig name { ... }``; settings are the bare ``key value`` lines."""

    name: Ident
    settings: tuple[Prop, ...]
    species: tuple[SpeciesDecl, ...]
    drives: tuple[DriveDecl, ...]
    images: tuple[ImageDecl, ...]
    ports: tuple[PortDecl, ...]
    lets: tuple[LetStmt, ...]
    span: Span


# ---- the array and the sequence -------------------------------------------
@node
class SiteStmt:
    """``site d = na at (0, 0) um``."""

    name: Ident
    species: Ident
    position: Expr
    span: Span


@node
class GroupStmt:
    """``group pair = d, h``."""

    name: Ident
    members: tuple[Ident, ...]
    span: Span


@node
class Indexed:
    """``d[3, 4]`` or ``d[0 .. 4, *]``: sites of a lattice by index (each index: an expr,
    a ``(low, high)`` pair of exprs, ends included, or None for ``*``)."""

    name: Ident
    indices: tuple
    span: Span


@node
class LatticeDecl:
    """``lattice d = square { pitch 5 um  size (12, 10) ... }``."""

    name: Ident
    kind: Ident
    props: tuple[Prop, ...]
    span: Span


@node
class LatticeFile:
    """``lattice t from "traps.csv" [props]``: positions from a CSV (x, y, species, name)."""

    name: Ident
    path: str
    path_span: Span
    props: tuple[Prop, ...]
    span: Span


@node
class PulseStmt:
    """``pulse drive [on targets] key value ...``."""

    drive: Ident
    targets: tuple[Ident, ...]
    props: tuple[Prop, ...]
    span: Span


@node
class WaitStmt:
    """``wait duration``."""

    duration: Expr
    span: Span


@node
class TogetherStmt:
    """``together [align start|end|center] { ... }``."""

    align: Ident | None
    body: tuple["Stmt", ...]
    span: Span


@node
class RepeatStmt:
    """``repeat count { ... }``."""

    count: Expr
    body: tuple["Stmt", ...]
    span: Span


@node
class DoStmt:
    """``do block(args)``."""

    block: Ident
    args: tuple[Arg, ...]
    span: Span


@node
class ImageStmt:
    """``image species -> record``."""

    species: Ident
    record: Ident
    props: tuple[Prop, ...]
    span: Span


@node
class SwitchStmt:
    """``switch port on|off``."""

    port: Ident
    on: bool
    span: Span


@node
class SetStmt:
    """``set port value``."""

    port: Ident
    value: Expr
    span: Span


@node
class TriggerStmt:
    """``trigger port [width ...]``: a short digital pulse."""

    port: Ident
    props: tuple[Prop, ...]
    span: Span


@dataclass(frozen=True)
class FieldStmt:
    """``field port value { ... }``: an electric field for the statements of the body."""

    port: Ident
    value: "Expr"
    body: tuple["Stmt", ...]
    span: Span


@dataclass(frozen=True)
class Compare:
    """``left op right`` with op in == != < <= > >=: a `when` condition."""

    op: str
    left: Expr
    right: Expr
    span: Span


@dataclass(frozen=True)
class MoveStmt:
    """``move sites to|by (x, y) um duration ... [profile minimum_jerk]``."""

    sites: tuple[Ident, ...]
    relative: bool
    target: "Expr"
    props: tuple[Prop, ...]
    span: Span


@dataclass(frozen=True)
class FillStmt:
    """``fill targets [from sources]``: move loaded atoms onto the target sites."""

    targets: tuple[Ident, ...]
    sources: tuple[Ident, ...] | None
    props: tuple[Prop, ...]
    span: Span


@dataclass(frozen=True)
class OutcomeIs:
    """``mid[h] is bright`` (or ``dark``): a `when` condition on one site."""

    selection: Expr
    word: Ident
    span: Span


@dataclass(frozen=True)
class WhenStmt:
    """``when condition { ... } [otherwise { ... }]``: played per record outcome."""

    condition: Union[Compare, OutcomeIs]
    then: tuple["Stmt", ...]
    otherwise: tuple["Stmt", ...] | None
    span: Span


Stmt = Union[PulseStmt, WaitStmt, TogetherStmt, RepeatStmt, DoStmt, ImageStmt,
             SwitchStmt, SetStmt, TriggerStmt, LetStmt, FieldStmt, MoveStmt, WhenStmt, FillStmt]


@node
class Param:
    """A block parameter with an optional default."""

    name: Ident
    default: Expr | None
    span: Span


@node
class BlockDef:
    """``block name(params) { ... }``."""

    name: Ident
    params: tuple[Param, ...]
    body: tuple[Stmt, ...]
    span: Span


@node
class SequenceDef:
    """``sequence name { ... }``."""

    name: Ident
    body: tuple[Stmt, ...]
    span: Span


@node
class ExpectStmt:
    """``expect d, h as phi_plus`` or ``expect d, h as |01>``."""

    sites: tuple[Ident, ...]
    state: Ident
    is_ket: bool
    span: Span
    props: tuple["Prop", ...] = ()  # ``phase 90 deg``, ``correlate (XXX, ZZZ)``
    factors: tuple[Ident, ...] = ()  # a product of single-site states: ``plus * zero``


@node
class UseStmt:
    """``use "file.rig"``."""

    path: str
    span: Span


@node
class ImportStmt:
    """``import "file.seq"``: blocks and constants of another file."""

    path: str
    span: Span


@dataclass(frozen=True)
class ScanRange:
    """``low .. high points N [spacing log]``: N values, evenly or geometrically spaced."""

    low: "Expr"
    high: "Expr"
    count: "Expr"
    spacing: Ident | None
    span: Span


@dataclass(frozen=True)
class ScanList:
    """``[a, b, c]``: the scanned values written out."""

    items: tuple["Expr", ...]
    span: Span


@dataclass(frozen=True)
class ScanDecl:
    """``scan NAME = values``: a named value that takes each of `values` in turn.

    The target is a constant's name, or ``drive.key`` / ``species.key`` for a rig value.
    """

    target: Ident
    values: Union[ScanRange, ScanList]
    span: Span


@dataclass(frozen=True)
class LockstepDecl:
    """``scan lockstep a, b``: these scans advance together (zipped), not as a product."""

    names: tuple[Ident, ...]
    span: Span


@dataclass(frozen=True)
class FreeDecl:
    """``free NAME = low .. high [start value]``: a value the optimiser may vary within bounds."""

    name: Ident
    low: "Expr"
    high: "Expr"
    start: "Expr | None"
    span: Span


Item = Union[UseStmt, ImportStmt, RigDef, LetStmt, SiteStmt, GroupStmt, BlockDef,
             SequenceDef, ExpectStmt, ScanDecl, LockstepDecl, FreeDecl, LatticeDecl, LatticeFile]


@node
class SourceFile:
    """One parsed file: its path, text and top-level items in order."""

    path: str
    text: str
    items: tuple[Item, ...]
