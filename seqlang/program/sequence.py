"""Resolve sequence statements into operations (:mod:`seqlang.program.model`).

Blocks are expanded where they are used (``do``); repetitions stay folded
(:class:`RepeatOp`) so that a long train costs memory once.
"""
from __future__ import annotations

import math

from ..compile import envelopes
from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import Diagnostic, Span, did_you_mean, error, warning
from ..lang.units import format_quantity
from . import props as p
from .decisions import FeedForwardMixin
from .evaluate import EvalError, Scope, SiteRef, evaluate, evaluate_any, expect_kind, within_reach
from .model import (Drive, FieldOp, FillOp, ImageOp, MoveOp, PortOp, PulseOp, RepeatOp, Rig, SerialOp, Shape, Site,
                    TogetherOp, WaitOp)

MAX_REPEAT = 1_000_000
MAX_BLOCK_DEPTH = 64
ALIGNMENTS = ("start", "end", "center")
REL_TOL = 1e-9


def _shape(expr: ast.Expr, scope: Scope) -> Shape:
    """``square`` or ``gaussian`` or ``ramped(ramp = 30 ns)`` → Shape."""
    name = expr.name if isinstance(expr, ast.NameRef) else expr.func.name if isinstance(expr, ast.Call) else None
    if name not in envelopes.SHAPES:
        raise EvalError(error(f"expected an envelope: {', '.join(envelopes.SHAPES)}", expr.span,
                              did_you_mean(name or "", envelopes.SHAPES)))
    params = []
    for arg in expr.args if isinstance(expr, ast.Call) else ():
        allowed = envelopes.SHAPE_PARAMS[name]
        if arg.name is None or arg.name.name not in allowed:
            raise EvalError(error(f"`{name}` takes {', '.join(f'`{a} = …`' for a in allowed) or 'no parameters'}",
                                  arg.span))
        params.append((arg.name.name, p.positive(p.duration, arg.name.name)(arg.value, scope)))
    return Shape(name, tuple(sorted(params)))


PULSE_KEYS = {
    "area": p.Key(p.positive(p.angle, "pulse area"), None),
    "duration": p.Key(p.positive(p.duration, "duration"), None),
    "rabi": p.Key(p.positive(p.frequency, "Rabi frequency"), None),
    "detuning": p.Key(p.frequency, 0.0),
    "phase": p.Key(p.angle, 0.0),
    "shape": p.Key(_shape, None),
}
TRIGGER_KEYS = {"width": p.Key(p.positive(p.duration, "width"), None)}
MOVE_PROFILES = ("minimum_jerk",)
MOVE_KEYS = {
    "duration": p.Key(p.positive(p.duration, "duration"), None, required=True, doc="how long the move takes"),
    "profile": p.Key(p.choice(*MOVE_PROFILES), "minimum_jerk"),
}
FILL_STRATEGIES = ("corridors", "straight")
FILL_KEYS = {
    "strategy": p.Key(p.choice(*FILL_STRATEGIES), "corridors",
                      doc="corridors: between the lattice rows and columns; straight: direct paths"),
}
E_FIELD = tuple(v - l for v, l in zip(units.VOLTAGE, units.LENGTH))


class SequenceResolver(FeedForwardMixin):
    """Turns statements into operations, collecting diagnostics."""

    def __init__(self, rig: Rig, sites: dict[str, Site], groups: dict[str, tuple[str, ...]],
                 blocks: dict[str, ast.BlockDef], diags: list[Diagnostic]):
        self.rig, self.sites, self.groups, self.blocks = rig, sites, groups, blocks
        self.diags = diags
        self.block_stack: list[str] = []
        self.records: dict[str, Span] = {}
        self.root: Scope | None = None
        self.positions = {name: site.position_m for name, site in sites.items()}  # after the moves so far

    def resolve_body(self, stmts, scope: Scope, span: Span) -> SerialOp:
        """All statements of a body, one after another."""
        if self.root is None:
            self.root, self.top_stmts = scope, stmts
        scope = scope.child()
        ops = [op for op in (self._stmt(s, scope) for s in stmts) if op is not None]
        return SerialOp(tuple(ops), span)

    def _stmt(self, stmt, scope: Scope):
        handler = getattr(self, "_" + type(stmt).__name__)
        try:
            return handler(stmt, scope)
        except EvalError as exc:
            self.diags.append(exc.diagnostic)
            return None

    # ---- statements ------------------------------------------------------
    def _LetStmt(self, stmt: ast.LetStmt, scope: Scope):
        if stmt.name.name in units.UNITS:
            raise EvalError(error(f"`{stmt.name.name}` is a unit and cannot be a constant's name", stmt.name.span))
        if self._deferred_let(stmt, scope):
            return None
        scope.values[stmt.name.name] = evaluate(stmt.value, scope)
        return None

    def _WaitStmt(self, stmt: ast.WaitStmt, scope: Scope) -> WaitOp:
        value = expect_kind(evaluate(stmt.duration, scope), units.DURATION, stmt.duration.span)
        if value <= 0:
            raise EvalError(error("a wait must be longer than zero", stmt.duration.span))
        if value < self.rig.tick_s:
            self.diags.append(warning(
                f"this {units.format_quantity(value, units.DURATION)} wait is shorter than one tick "
                f"({units.format_quantity(self.rig.tick_s, units.DURATION)}): tick rounding removes it or "
                "stretches it to a whole tick", stmt.duration.span))
        return WaitOp(value, stmt.span)

    def _TogetherStmt(self, stmt: ast.TogetherStmt, scope: Scope) -> TogetherOp:
        align = stmt.align.name if stmt.align else "start"
        if align not in ALIGNMENTS:
            raise EvalError(error(f"expected one of {', '.join(ALIGNMENTS)}", stmt.align.span,
                                  did_you_mean(align, ALIGNMENTS)))
        inner = scope.child()
        ops = tuple(op for op in (self._stmt(s, inner) for s in stmt.body) if op is not None)
        return TogetherOp(align, ops, stmt.span)

    def _RepeatStmt(self, stmt: ast.RepeatStmt, scope: Scope) -> RepeatOp:
        count = self._repeat_count(stmt.count, scope)
        return RepeatOp(count, self.resolve_body(stmt.body, scope, stmt.span), stmt.span)

    def _repeat_count(self, expr: ast.Expr, scope: Scope) -> int:
        if isinstance(expr, ast.NameRef) and expr.name in ("forever", "always", "inf", "infinite"):
            raise EvalError(error("repetition must be bounded", expr.span, "give a count, e.g. `repeat 8 { … }`"))
        value = expect_kind(evaluate(expr, scope), units.DIMENSIONLESS, expr.span)
        if value != int(value) or value < 1:
            raise EvalError(error(f"a repeat count must be a whole number of at least 1, got {value:g}", expr.span))
        if value > MAX_REPEAT:
            raise EvalError(error(f"{value:g} repetitions is absurd (the limit is {MAX_REPEAT:,})", expr.span))
        return int(value)

    def _DoStmt(self, stmt: ast.DoStmt, scope: Scope) -> SerialOp:
        block = self.blocks.get(stmt.block.name)
        if block is None:
            raise EvalError(error(f"unknown block `{stmt.block.name}`", stmt.block.span,
                                  did_you_mean(stmt.block.name, self.blocks)))
        if stmt.block.name in self.block_stack:
            raise EvalError(error(f"block `{stmt.block.name}` calls itself", stmt.span))
        if len(self.block_stack) >= MAX_BLOCK_DEPTH:
            raise EvalError(error(f"blocks are nested more than {MAX_BLOCK_DEPTH} deep here "
                                  f"(`{self.block_stack[0]}` → … → `{self.block_stack[-1]}` → "
                                  f"`{stmt.block.name}`)", stmt.span))
        inner = self._bind_args(block, stmt, scope)
        self.block_stack.append(block.name.name)
        try:
            return self.resolve_body(block.body, inner, stmt.span)
        finally:
            self.block_stack.pop()

    def _bind_args(self, block: ast.BlockDef, stmt: ast.DoStmt, scope: Scope) -> Scope:
        params = {prm.name.name: prm for prm in block.params}
        inner = Scope({}, self.root)
        positional = [a for a in stmt.args if a.name is None]
        if len(positional) > len(block.params):
            raise EvalError(error(f"block `{block.name.name}` takes {len(block.params)} values, "
                                  f"got {len(positional)}", stmt.span))
        for prm, arg in zip(block.params, positional):
            inner.values[prm.name.name] = self._arg_value(arg.value, scope)
        for arg in (a for a in stmt.args if a.name is not None):
            if arg.name.name not in params:
                raise EvalError(error(f"block `{block.name.name}` has no parameter `{arg.name.name}`",
                                      arg.name.span, did_you_mean(arg.name.name, params)))
            inner.values[arg.name.name] = self._arg_value(arg.value, scope)
        for prm in block.params:
            if prm.name.name not in inner.values:
                if prm.default is None:
                    raise EvalError(error(f"block `{block.name.name}` needs a value for `{prm.name.name}`",
                                          stmt.span))
                inner.values[prm.name.name] = self._arg_value(prm.default, inner)
        return inner

    def _arg_value(self, expr: ast.Expr, scope: Scope):
        if isinstance(expr, ast.NameRef) and scope.lookup(expr.name) is None:
            names = self._site_names(expr.name)
            if names is not None:
                return SiteRef(names, expr.span)
            if self._named_ref(expr) is not None:
                return self._named_ref(expr)
            raise self._unknown_argument(expr, scope)
        return evaluate_any(expr, scope)

    def _site_names(self, name: str):
        if name in self.sites:
            return (name,)
        return self.groups.get(name)

    def _ImageStmt(self, stmt: ast.ImageStmt, scope: Scope) -> ImageOp:
        species = stmt.species.name
        if species not in self.rig.species:
            raise EvalError(error(f"unknown species `{species}`", stmt.species.span,
                                  did_you_mean(species, self.rig.species)))
        imaging = self.rig.imaging.get(species)
        if imaging is None:
            raise EvalError(error(f"the rig declares no imaging for `{species}`", stmt.species.span,
                                  f"add `image {species} {{ port … duration … }}` to the rig"))
        if stmt.props:
            raise EvalError(error("imaging takes its settings from the rig", stmt.props[0].span))
        record = stmt.record.name
        if record in self.records and not self.block_stack:
            raise EvalError(error(f"record `{record}` is written twice", stmt.record.span))
        if getattr(self, "when_stack", None):
            raise EvalError(error("imaging cannot depend on a record: it is part of the fixed timeline",
                                  stmt.span, "image before or after the `when`"))
        self.records[record] = stmt.record.span
        self._note_record(record, species)
        return ImageOp(species, record, imaging.duration_s, stmt.span)

    def _port(self, ident: ast.Ident, kind: str):
        port = self.rig.ports.get(ident.name)
        if port is None:
            raise EvalError(error(f"unknown port `{ident.name}`", ident.span, did_you_mean(ident.name, self.rig.ports)))
        if port.kind != kind:
            raise EvalError(error(f"port `{ident.name}` is {port.kind}, this needs {'an' if kind == 'analog' else 'a'} {kind} port", ident.span))
        return port

    def _SwitchStmt(self, stmt: ast.SwitchStmt, scope: Scope) -> PortOp:
        self._port(stmt.port, "digital")
        return PortOp(stmt.port.name, "switch", 1.0 if stmt.on else 0.0, 0.0, stmt.span)

    def _SetStmt(self, stmt: ast.SetStmt, scope: Scope) -> PortOp:
        port = self._port(stmt.port, "analog")
        value = evaluate(stmt.value, scope)
        if port.unit_dim is not None:
            expect_kind(value, port.unit_dim, stmt.value.span)
        if port.value_range and not port.value_range[0] <= value.value <= port.value_range[1]:
            low, high = (format_quantity(v, value.dim) for v in port.value_range)
            raise EvalError(error(f"{value.describe()} is outside the range {low} .. {high} of port `{port.name}`",
                                  stmt.value.span))
        return PortOp(port.name, "set", value.value, 0.0, stmt.span)

    def _TriggerStmt(self, stmt: ast.TriggerStmt, scope: Scope) -> PortOp:
        port = self._port(stmt.port, "digital")
        v = p.read_props(stmt.props, TRIGGER_KEYS, scope, "a trigger", stmt.span, self.diags)
        return PortOp(port.name, "trigger", 1.0, v["width"] or port.width_s, stmt.span)

    # ---- fields and moves ------------------------------------------------------
    def _FieldStmt(self, stmt: ast.FieldStmt, scope: Scope) -> FieldOp:
        port = self._port(stmt.port, "analog")
        per_volt = port.extra.get("field_per_volt")
        if per_volt is None:
            raise EvalError(error(f"port `{port.name}` has no `field_per_volt` calibration", stmt.port.span,
                                  "declare it in the rig, e.g. `field_per_volt 0.5 / cm`"))
        value = evaluate(stmt.value, scope)
        if value.dim == units.VOLTAGE:
            volts, field = value.value, value.value * per_volt
        else:
            field = expect_kind(value, E_FIELD, stmt.value.span)
            volts = field / per_volt
        if port.value_range and not port.value_range[0] <= volts <= port.value_range[1]:
            low, high = (format_quantity(x, units.VOLTAGE) for x in port.value_range)
            raise EvalError(error(f"{format_quantity(volts, units.VOLTAGE)} is outside the range {low} .. {high} "
                                  f"of port `{port.name}`", stmt.value.span))
        body = self.resolve_body(stmt.body, scope, stmt.span)
        return FieldOp(port.name, field, volts, body, stmt.span)

    def _MoveStmt(self, stmt: ast.MoveStmt, scope: Scope) -> MoveOp | None:
        names: list[str] = []
        for ident in stmt.sites:
            names += [n for n in self._target_names(ident, scope) if n not in names]
        v = p.read_props(stmt.props, MOVE_KEYS, scope, "a move", stmt.span, self.diags)
        target = self._coordinates(stmt.target, scope, "this displacement" if stmt.relative else "this position")
        if not names or v["duration"] is None:
            return None
        if not stmt.relative and len(names) != 1:
            raise EvalError(error("`move … to` takes one site; move a group with `by`", stmt.sites[0].span))
        start = self.positions[names[0]]
        shift = target if stmt.relative else tuple(t - s for t, s in zip(target, start))
        for name in names:
            self.positions[name] = within_reach([a + d for a, d in zip(self.positions[name], shift)], stmt.span,
                                                f"this move takes `{name}` to a place that")
        return MoveOp(tuple(names), shift, v["duration"], v["profile"], stmt.span)

    def _FillStmt(self, stmt: ast.FillStmt, scope: Scope) -> FillOp | None:
        targets = self._names_of(stmt.targets, scope)
        sources = self._names_of(stmt.sources, scope) if stmt.sources is not None else \
            tuple(n for n, s in self.sites.items() if s.species in {self.sites[t].species for t in targets})
        v = p.read_props(stmt.props, FILL_KEYS, scope, "a fill", stmt.span, self.diags)
        if not targets:
            return None
        kinds = {self.sites[n].species for n in sources} - {self.sites[t].species for t in targets}
        if kinds:
            raise EvalError(error(f"the sources hold {', '.join(sorted(kinds))} atoms, which no target site "
                                  "holds", stmt.sources[0].span, "fill each species from its own sites"))
        return FillOp(targets, sources, v["strategy"], stmt.span)

    def _names_of(self, idents, scope: Scope) -> tuple[str, ...]:
        names: list[str] = []
        for ident in idents:
            names += [n for n in self._target_names(ident, scope) if n not in names]
        return tuple(names)

    def _coordinates(self, expr: ast.Expr, scope: Scope, what: str) -> tuple[float, float, float]:
        value = evaluate_any(expr, scope)
        if not isinstance(value, tuple) or len(value) not in (2, 3):
            raise EvalError(error("expected coordinates such as `(3, 0) um`", expr.span))
        coords = [expect_kind(q, units.LENGTH, expr.span) for q in value]
        return within_reach(coords + [0.0] * (3 - len(coords)), expr.span, what)

    # ---- pulses ------------------------------------------------------------
    def _PulseStmt(self, stmt: ast.PulseStmt, scope: Scope) -> PulseOp | None:
        drive = self._drive_of(stmt.drive, scope)
        targets = self._targets(stmt, drive, scope)
        selection = self._statement_selection([prop.value for prop in stmt.props], scope, stmt.span)
        if selection is not None:
            return self._keyed_pulse(stmt, drive, targets, scope, selection) if targets is not None else None
        before = len(self.diags)
        v = p.read_props(stmt.props, PULSE_KEYS, scope, "a pulse", stmt.span, self.diags)
        if len(self.diags) > before or targets is None:
            return None
        shape = v["shape"] or Shape("square")
        if shape.kind == "ramped" and not shape.params:
            shape = Shape("ramped", (("ramp", drive.rise_s),))
        duration, rabi, area = self._timing(v, shape, drive, stmt)
        self._check_limits(drive, rabi, v, duration, shape, stmt)
        return PulseOp(drive.name, targets, duration, rabi, v["detuning"], v["phase"], area, shape, stmt.span)

    def _targets(self, stmt: ast.PulseStmt, drive: Drive, scope: Scope):
        species_sites = tuple(n for n, s in self.sites.items() if s.species == drive.species)
        if not stmt.targets:
            if not species_sites:
                raise EvalError(error(f"no `{drive.species}` site for drive `{drive.name}`", stmt.drive.span))
            return species_sites
        chosen: list[str] = []
        for ident in stmt.targets:
            for name in self._target_names(ident, scope):
                site = self.sites[name]
                if site.species != drive.species:
                    self.diags.append(error(f"drive `{drive.name}` drives `{drive.species}` atoms, but site "
                                            f"`{name}` holds `{site.species}`", ident.span))
                elif name not in chosen:
                    chosen.append(name)
        if drive.reach == "all" and set(chosen) != set(species_sites) and chosen:
            self.diags.append(error(
                f"drive `{drive.name}` reaches all `{drive.species}` atoms at once; it cannot address only "
                f"{', '.join(chosen)}", stmt.targets[0].span,
                "drop `on …`, or declare the drive with `reach each`"))
            return None
        return tuple(sorted(chosen, key=list(self.sites).index)) if chosen else None

    def _target_names(self, ident: ast.Ident, scope: Scope) -> tuple[str, ...]:
        bound = scope.lookup(ident.name)
        if isinstance(bound, SiteRef):
            return bound.sites
        names = self._site_names(ident.name)
        if names is None:
            self.diags.append(error(f"unknown site `{ident.name}`", ident.span,
                                    did_you_mean(ident.name, list(self.sites) + list(self.groups))))
            return ()
        return names

    def _timing(self, v: dict, shape: Shape, drive: Drive, stmt: ast.PulseStmt):
        """Two of area, duration and Rabi frequency give the third; all three finite and positive."""
        try:
            duration, rabi, area = self._derive_timing(v, shape, drive, stmt)
        except (ZeroDivisionError, OverflowError):
            duration, rabi, area = math.nan, math.nan, math.nan
        for name, value in (("duration", duration), ("Rabi frequency", rabi), ("area", area)):
            if not (math.isfinite(value) and value > 0):
                raise EvalError(error(f"the {name} this pulse would need is not a positive finite number "
                                      "(the other values given are too far apart)", stmt.span,
                                      "check the `area`, `duration` and `rabi` given"))
        return duration, rabi, area

    def _derive_timing(self, v: dict, shape: Shape, drive: Drive, stmt: ast.PulseStmt):
        """Two of area, duration and Rabi frequency give the third."""
        area, duration, rabi = v["area"], v["duration"], v["rabi"]
        spans = v["__spans__"]
        if area is None and duration is None:
            raise EvalError(error("a pulse needs an `area` or a `duration`", stmt.span,
                                  "e.g. `area pi` or `duration 200 ns`"))
        if area is not None and duration is not None:
            derived = area / (2 * math.pi * envelopes.area_factor(shape, duration))
            if rabi is not None and abs(derived - rabi) > REL_TOL * rabi:
                raise EvalError(error("`area`, `duration` and `rabi` disagree; give only two of them",
                                      spans["rabi"]))
            return duration, derived, area
        rabi = rabi if rabi is not None else drive.max_rabi_hz
        if duration is None:
            try:
                return envelopes.duration_for_area(shape, area, rabi), rabi, area
            except ValueError:
                raise EvalError(error(
                    f"a {shape.kind} pulse of this width cannot reach area {area / math.pi:.6g}π at "
                    f"{units.format_quantity(rabi, units.FREQUENCY)}", spans.get("shape", stmt.span),
                    "widen the envelope, raise `rabi`, or give a `duration`")) from None
        return duration, rabi, envelopes.pulse_area(shape, duration, rabi)

    def _check_limits(self, drive: Drive, rabi: float, v: dict, duration: float, shape: Shape,
                      stmt: ast.PulseStmt) -> None:
        spans = v["__spans__"]

        def where() -> Span:  # spans are built only for a message
            return spans.get("rabi") or spans.get("area") or spans.get("duration") or stmt.span
        if rabi > drive.max_rabi_hz * (1 + REL_TOL):
            self.diags.append(error(
                f"Rabi frequency {units.format_quantity(rabi, units.FREQUENCY)} is above the maximum "
                f"{units.format_quantity(drive.max_rabi_hz, units.FREQUENCY)} of drive `{drive.name}`", where(),
                "lower `rabi` or lengthen the pulse"))
        low, high = drive.detuning_range_hz
        if not low <= v["detuning"] <= high:
            self.diags.append(error(
                f"detuning {units.format_quantity(v['detuning'], units.FREQUENCY)} is outside the range "
                f"{units.format_quantity(low, units.FREQUENCY)} .. {units.format_quantity(high, units.FREQUENCY)}"
                f" of drive `{drive.name}`", spans.get("detuning", stmt.span)))
        if duration < drive.rise_s:
            self.diags.append(error(
                f"a {units.format_quantity(duration, units.DURATION)} pulse is shorter than the rise time "
                f"{units.format_quantity(drive.rise_s, units.DURATION)} of drive `{drive.name}`",
                spans.get("duration") or where()))
        elif duration < envelopes.minimum_duration(shape):
            self.diags.append(error(f"a {units.format_quantity(duration, units.DURATION)} pulse is too short "
                                    "for its two ramps", spans.get("shape", stmt.span)))
