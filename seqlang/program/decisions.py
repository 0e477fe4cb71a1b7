"""Feed-forward in the resolver: `when` blocks, record values, drive/record block arguments.

A statement that reads an image record is evaluated once per *key* of its
record selection (the number of selected sites reported bright, 0..N), so that
every value the sequencer may have to play is known, unit-checked and
range-checked before the experiment runs:

>>> # when bright(mid[h1, h2]) >= 1 { pulse mw_na area pi }   -> BranchOp, enabled (F, T, T)
>>> # pulse mw_na area pi/2 phase asin(2*fraction(mid) - 1)    -> PulseOp with one Variant per key
"""
from __future__ import annotations

import math
import operator
from dataclasses import dataclass

from ..compile import envelopes
from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import Diagnostic, Span, did_you_mean, error, warning
from . import props as p
from .evaluate import RECORD_FUNCTIONS, RECORD_VALUES, Deferred, EvalError, Quantity, Scope, evaluate
from .model import BranchOp, Decision, Drive, PulseOp, Selection, Shape, Variant

COMPARISONS = {"==": operator.eq, "!=": operator.ne, "<": operator.lt, "<=": operator.le,
               ">": operator.gt, ">=": operator.ge}
OUTCOME_WORDS = ("bright", "dark")
REL_TOL = 1e-9


@dataclass(frozen=True)
class DriveRef:
    """A block argument naming a drive: `do echo(drv = mw_cs)`."""

    drive: str
    span: Span


@dataclass(frozen=True)
class RecordRef:
    """A block argument naming an image record: `do correct(rec = mid)`."""

    record: str
    span: Span


def key_words(selection: Selection, key: int) -> str:
    """How a key reads in messages: "`mid[h]` reads bright", "`mid[a, b]` reads 1 bright"."""
    if len(selection.sites) == 1:
        return f"`{selection.label()}` reads {'bright' if key else 'dark'}"
    return f"`{selection.label()}` reads {key} bright"


def _for_key(diagnostic: Diagnostic, selection: Selection, key: int) -> Diagnostic:
    return Diagnostic(diagnostic.severity, f"{diagnostic.message} (when {key_words(selection, key)})",
                      diagnostic.span, diagnostic.hint)


def record_calls(expr, scope: Scope) -> list[tuple[ast.Call, Scope]]:
    """Every `bright/fraction/outcome(…)` an expression reads, through `let`s that depend on records,
    in reading order. A loop rather than recursion: every pulse line of a generated
    program passes here, and most of its nodes are numbers."""
    out: list[tuple[ast.Call, Scope]] = []
    stack = [(expr, scope)]
    followed: set[int] = set()  # each `let` once: one may read a name it is itself bound to
    while stack:
        expr, scope = stack.pop()
        kind = expr.__class__
        if kind is ast.Number or kind is ast.UnitRef:
            continue
        if kind is ast.WithUnit or kind is ast.Neg:
            stack.append((expr.operand, scope))
        elif kind is ast.BinOp or kind is ast.Compare:
            stack += ((expr.right, scope), (expr.left, scope))
        elif kind is ast.Call:
            if expr.func.name in RECORD_FUNCTIONS:
                out.append((expr, scope))
            else:
                stack += ((a.value, scope) for a in reversed(expr.args))
        elif kind is ast.TupleExpr:
            stack += ((item, scope) for item in reversed(expr.items))
        elif kind is ast.NameRef:
            value = scope.lookup(expr.name)
            if isinstance(value, Deferred) and id(value) not in followed:
                followed.add(id(value))
                stack.append((value.expr, value.scope))
    return out


class _KeyReader:
    """The record values of one key, for `RECORD_VALUES` while a statement is evaluated."""

    def __init__(self, resolver: "FeedForwardMixin", selection: Selection, key: int):
        self.resolver, self.selection, self.key = resolver, selection, key

    def __call__(self, call: ast.Call, scope: Scope) -> Quantity:
        chosen = self.resolver._call_selection(call, scope)
        if chosen != self.selection:
            raise EvalError(error(f"this reads `{chosen.label()}`, but the statement is looked up by "
                                  f"`{self.selection.label()}`; a conditioned statement depends on one record "
                                  "selection", call.span, "select the same sites in every record value"))
        count = len(chosen.sites)
        if call.func.name == "outcome" and count != 1:
            raise EvalError(error(f"`outcome(…)` reads one site; `{chosen.label()}` has {count}", call.span,
                                  "use `bright(…)` or `fraction(…)` for several sites"))
        return Quantity(self.key / count if call.func.name == "fraction" else float(self.key))


class FeedForwardMixin:
    """The feed-forward part of :class:`~seqlang.program.sequence.SequenceResolver`."""

    # ---- names usable as block arguments ----------------------------------------
    def _named_ref(self, expr: ast.Expr):
        """A drive or record named as a block argument, else None."""
        if not isinstance(expr, ast.NameRef):
            return None
        if expr.name in self.rig.drives:
            return DriveRef(expr.name, expr.span)
        if expr.name in self._record_species():
            return RecordRef(expr.name, expr.span)
        return None

    def _unknown_argument(self, expr: ast.NameRef, scope: Scope) -> EvalError:
        known = [*scope.names(), *self.sites, *self.groups, *self.rig.drives, *self._record_species()]
        return EvalError(error(f"unknown name `{expr.name}`", expr.span, did_you_mean(expr.name, known)
                               or "a block argument is a value, a site or group, a drive or a record"))

    def _drive_of(self, ident: ast.Ident, scope: Scope) -> Drive:
        bound = scope.lookup(ident.name)
        name = bound.drive if isinstance(bound, DriveRef) else ident.name
        drive = self.rig.drives.get(name)
        if drive is None:
            raise EvalError(error(f"unknown drive `{ident.name}`", ident.span, did_you_mean(ident.name, self.rig.drives)))
        return drive

    # ---- records ----------------------------------------------------------------
    def _record_species(self) -> dict[str, str]:
        if not hasattr(self, "_records_written"):
            self._records_written = {}
        return self._records_written

    def _note_record(self, record: str, species: str) -> None:
        self._record_species()[record] = species

    def _later_image(self, record: str) -> ast.ImageStmt | None:
        """An image statement anywhere in the sequence or its blocks that writes `record`."""
        stack = list(getattr(self, "top_stmts", ())) + [s for b in self.blocks.values() for s in b.body]
        while stack:
            stmt = stack.pop()
            if isinstance(stmt, ast.ImageStmt) and stmt.record.name == record:
                return stmt
            for attr in ("body", "then", "otherwise"):
                stack += list(getattr(stmt, attr, None) or ())
        return None

    def _record_name(self, ident: ast.Ident, scope: Scope) -> str:
        bound = scope.lookup(ident.name)
        name = bound.record if isinstance(bound, RecordRef) else ident.name
        if name in self._record_species():
            return name
        later = self._later_image(name)
        if later is not None:
            raise EvalError(error(f"record `{name}` is used before it is written (by the imaging on line "
                                  f"{later.span.line})", ident.span, "image first, then condition on the record"))
        raise EvalError(error(f"unknown record `{ident.name}`", ident.span,
                              did_you_mean(ident.name, self._record_species())
                              or "a record is written by `image SPECIES -> NAME`"))

    def _selection(self, expr: ast.Expr, scope: Scope) -> Selection:
        """`mid`, `mid[h1, h2]` or `mid[helpers]` → the record and its selected sites."""
        if isinstance(expr, ast.NameRef):
            record = self._record_name(ast.Ident(expr.name, expr.span), scope)
            species = self._record_species()[record]
            sites = tuple(n for n, s in self.sites.items() if s.species == species)
            return Selection(record, sites, species, expr.span)
        if not isinstance(expr, ast.RecordSel):
            raise EvalError(error("expected an image record, e.g. `mid` or `mid[h1, h2]`", expr.span))
        record = self._record_name(expr.record, scope)
        species = self._record_species()[record]
        chosen: list[str] = []
        for ident in expr.sites:
            for name in self._target_names(ident, scope):
                if self.sites[name].species != species:
                    raise EvalError(error(f"record `{record}` images `{species}` atoms; site `{name}` holds "
                                          f"`{self.sites[name].species}`, which it never images", ident.span))
                if name not in chosen:
                    chosen.append(name)
        if not chosen:
            raise EvalError(error("no site selected", expr.span))
        order = list(self.sites)
        return Selection(record, tuple(sorted(chosen, key=order.index)), species, expr.span)

    def _call_selection(self, call: ast.Call, scope: Scope) -> Selection:
        if len(call.args) != 1 or call.args[0].name is not None:
            raise EvalError(error(f"`{call.func.name}` takes one record selection, e.g. "
                                  f"`{call.func.name}(mid[h1, h2])`", call.span))
        return self._selection(call.args[0].value, scope)

    def _statement_selection(self, exprs, scope: Scope, span: Span) -> Selection | None:
        """The one record selection a statement's expressions read (None if they read none)."""
        found = [self._call_selection(call, sc) for e in exprs for call, sc in record_calls(e, scope)]
        outer = self.when_stack[-1] if getattr(self, "when_stack", None) else None
        for selection in found + ([outer] if outer and found else []):
            if selection != found[0]:
                raise EvalError(error(f"this depends on `{selection.label()}` and on `{found[0].label()}`; a "
                                      "conditioned statement is looked up by one record selection", span,
                                      "condition on the same sites as the enclosing `when`"))
        return found[0] if found else None

    def _per_key(self, selection: Selection, fn):
        """fn() evaluated for every key of `selection`, with the record values of that key."""
        out = []
        for key in selection.keys:
            token = RECORD_VALUES.set(_KeyReader(self, selection, key))
            try:
                out.append(fn(key))
            except EvalError as exc:
                raise EvalError(_for_key(exc.diagnostic, selection, key)) from None
            finally:
                RECORD_VALUES.reset(token)
        return out

    # ---- let: defer record-dependent constants ------------------------------------
    def _deferred_let(self, stmt: ast.LetStmt, scope: Scope) -> bool:
        if not record_calls(stmt.value, scope):
            return False
        # The value reads the names bound before it (`let x = x + fraction(...)` reads the earlier
        # `x`), so it keeps a copy of this scope's bindings as they are now, not the scope itself.
        before = Scope(dict(scope.values), scope.parent, scope.pinned)
        scope.values[stmt.name.name] = Deferred(stmt.value, before)
        return True

    # ---- when ---------------------------------------------------------------------
    def _WhenStmt(self, stmt: ast.WhenStmt, scope: Scope) -> BranchOp:
        selection, enabled = self._condition(stmt.condition, scope)
        self.when_stack = getattr(self, "when_stack", [])
        self.when_stack.append(selection)
        try:
            then = self.resolve_body(stmt.then, scope, stmt.span)
            otherwise = self.resolve_body(stmt.otherwise or (), scope, stmt.span)
        finally:
            self.when_stack.pop()
        self._warn_padding(stmt, then, otherwise)
        return BranchOp(Decision(selection, tuple(enabled), None, stmt.condition.span), then, otherwise, stmt.span)

    def _condition(self, cond, scope: Scope) -> tuple[Selection, list[bool]]:
        if isinstance(cond, ast.OutcomeIs):
            selection = self._selection(cond.selection, scope)
            if cond.word.name not in OUTCOME_WORDS:
                raise EvalError(error("expected `bright` or `dark`", cond.word.span,
                                      did_you_mean(cond.word.name, OUTCOME_WORDS)))
            if len(selection.sites) != 1:
                raise EvalError(error(f"`is {cond.word.name}` reads one site; `{selection.label()}` has "
                                      f"{len(selection.sites)}", cond.selection.span,
                                      f"compare a count instead, e.g. `bright({selection.label()}) >= 1`"))
            self._statement_selection([], scope, cond.span)
            self._same_as_outer(selection, cond.span)
            return selection, [bool(k) == (cond.word.name == "bright") for k in selection.keys]
        selection = self._statement_selection([cond.left, cond.right], scope, cond.span)
        if selection is None:
            raise EvalError(error("a `when` condition must read an image record", cond.span,
                                  "e.g. `when bright(mid[h1, h2]) >= 1 { … }`"))
        self._same_as_outer(selection, cond.span)
        return selection, self._per_key(selection, lambda k: self._compare(cond, scope))

    def _same_as_outer(self, selection: Selection, span: Span) -> None:
        outer = self.when_stack[-1] if getattr(self, "when_stack", None) else None
        if outer is not None and outer != selection:
            raise EvalError(error(f"this depends on `{selection.label()}`, the enclosing `when` on "
                                  f"`{outer.label()}`; a conditioned statement is looked up by one record "
                                  "selection", span))

    def _compare(self, cond: ast.Compare, scope: Scope) -> bool:
        left, right = evaluate(cond.left, scope), evaluate(cond.right, scope)
        if left.dim != right.dim:
            raise EvalError(error(f"cannot compare {left.kind} with {right.kind}", cond.span))
        return bool(COMPARISONS[cond.op](left.value, right.value + 0.0))

    def _warn_padding(self, stmt: ast.WhenStmt, then, otherwise) -> None:
        from ..compile.lower import duration_of
        a, b = duration_of(then), duration_of(otherwise)
        # Without `otherwise` the block simply has its slot in the timeline, idle when not played.
        if stmt.otherwise is None or abs(a - b) <= REL_TOL * max(a, b, 1e-300):
            return
        shorter = "`otherwise` branch" if b < a else "`when` branch"
        self.diags.append(warning(
            f"the {shorter} is {units.format_quantity(abs(a - b), units.DURATION)} shorter; it is padded with "
            "idle time so that what follows starts at the same time for every outcome", stmt.span,
            "make both branches equally long (e.g. with `wait`) to silence this"))

    # ---- pulses with record-dependent values -------------------------------------
    def _keyed_pulse(self, stmt: ast.PulseStmt, drive: Drive, targets, scope: Scope,
                     selection: Selection) -> PulseOp | None:
        values = self._per_key(selection, lambda k: self._read_keyed(stmt, scope))
        if values is None or any(v is None for v in values):
            return None
        shape = values[0]["shape"] or Shape("square")
        if shape.kind == "ramped" and not shape.params:
            shape = Shape("ramped", (("ramp", drive.rise_s),))
        duration = self._keyed_duration(values, shape, drive, stmt)
        variants, before = [], len(self.diags)
        for key, v in zip(selection.keys, values):
            variant = self._variant(v, shape, drive, duration, stmt)
            found: list[Diagnostic] = []
            saved, self.diags = self.diags, found
            try:
                self._check_limits(drive, variant.rabi_hz, {**v, "detuning": variant.detuning_hz}, duration,
                                   shape, stmt)
            finally:
                self.diags = saved
            self.diags += [_for_key(d, selection, key) for d in found]
            variants.append(variant)
        if len(self.diags) > before:
            return None
        enabled = tuple(v.area_rad > 0 for v in variants)
        nominal = variants[enabled.index(True)] if any(enabled) else variants[0]
        return PulseOp(drive.name, targets, duration, nominal.rabi_hz, nominal.detuning_hz, nominal.phase_rad,
                       nominal.area_rad, shape, stmt.span, Decision(selection, enabled, tuple(variants), stmt.span))

    def _read_keyed(self, stmt: ast.PulseStmt, scope: Scope) -> dict:
        found: list[Diagnostic] = []
        v = p.read_props(stmt.props, KEYED_PULSE_KEYS, scope, "a pulse", stmt.span, found)
        if found:
            raise EvalError(found[0])
        return v

    def _keyed_duration(self, values: list[dict], shape: Shape, drive: Drive, stmt: ast.PulseStmt) -> float:
        """One duration for every key: the timeline the sequencer plays is fixed."""
        durations = {v["duration"] for v in values}
        spans = values[0]["__spans__"]
        if len(durations) > 1:
            raise EvalError(error("a pulse's duration cannot depend on a record: the sequencer plays one fixed "
                                  "timeline", spans["duration"], "condition `area`, `rabi` or `phase` instead"))
        if None not in durations:
            return durations.pop()
        if all(v["area"] is None for v in values):
            raise EvalError(error("a pulse needs an `area` or a `duration`", stmt.span))
        longest, implied = 0.0, set()
        for v in values:
            rabi = v["rabi"] if v["rabi"] is not None else drive.max_rabi_hz
            if v["area"]:
                longest = max(longest, envelopes.duration_for_area(shape, v["area"], rabi))
                if v["rabi"] is not None:
                    implied.add(round(envelopes.duration_for_area(shape, v["area"], rabi), 15))
        if len(implied) > 1:
            raise EvalError(error("with both `area` and `rabi` given, the duration would change with the record; "
                                  "the sequencer plays one fixed timeline", spans.get("rabi", stmt.span),
                                  "give a `duration` and one of `area` or `rabi`"))
        if longest == 0.0:
            raise EvalError(error("this pulse has zero area for every outcome", spans.get("area", stmt.span)))
        return longest

    def _variant(self, v: dict, shape: Shape, drive: Drive, duration: float, stmt) -> Variant:
        """The key's Rabi frequency and area over the shared duration."""
        factor = 2 * math.pi * envelopes.area_factor(shape, duration)
        if v["area"] is not None:
            rabi = v["area"] / factor
            if v["rabi"] is not None and v["duration"] is not None and abs(rabi - v["rabi"]) > REL_TOL * v["rabi"]:
                raise EvalError(error("`area`, `duration` and `rabi` disagree; give only two of them",
                                      v["__spans__"]["rabi"]))
        else:
            rabi = v["rabi"] if v["rabi"] is not None else drive.max_rabi_hz
        return Variant(rabi, v["detuning"], v["phase"], rabi * factor)


KEYED_PULSE_KEYS = {
    # A record-dependent area may be zero for some keys: the pulse is then not played.
    "area": p.Key(p.non_negative(p.angle, "pulse area"), None),
    "duration": p.Key(p.positive(p.duration, "duration"), None),
    "rabi": p.Key(p.positive(p.frequency, "Rabi frequency"), None),
    "detuning": p.Key(p.frequency, 0.0),
    "phase": p.Key(p.angle, 0.0),
    "shape": p.Key(lambda e, s: _shape_reader(e, s), None),
}


def _shape_reader(expr, scope):
    from .sequence import _shape
    return _shape(expr, scope)
