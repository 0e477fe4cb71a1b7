"""Scan declarations: the values each scanned name takes, and the points they span.

A program with scans is resolved once per point (see docs/scans.md): the
scanned names are bound, before anything else, to one point's values, so they
can stand wherever a constant can — and, written ``drive.key`` or
``species.key``, in place of a rig value.

>>> from seqlang.lang.parser import parse_text
>>> src = parse_text("scan t = 0 us .. 2 us points 3", "x.seq")
>>> space = resolve_scans(src, [])
>>> [space.label(space.point(i)) for i in range(space.count)]
['t = 0 us', 't = 1 us', 't = 2 us']
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace

from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import Diagnostic, Span, did_you_mean, error
from ..lang.units import DIMENSIONLESS, Quantity
from .evaluate import EvalError, Scope, evaluate

SPACINGS = ("linear", "log")
MAX_POINTS = 1_000_000  # a typo guard: `points 1e9` is never meant


@dataclass(frozen=True)
class ScanAxis:
    """One scanned name: its values (SI), their dimension and the unit it was written in."""

    name: str
    values: tuple[float, ...]
    dim: tuple[int, ...]
    unit: str
    span: Span
    spacing: str = "listed"  # "linear" or "log" for ranges
    target_span: Span | None = None  # where the scanned name (or `owner.key`) is written

    @property
    def factor(self) -> float:
        """SI value of one display unit (1 for plain numbers)."""
        return units.UNITS[self.unit][0] if self.unit else 1.0

    def shown(self, value: float) -> float:
        """`value` (SI) in the display unit, rounded to hide binary noise (1.4e-6 / 1e-6)."""
        return float(f"{value / self.factor:.12g}")

    def describe(self, value: float) -> str:
        return f"{self.name} = {self.shown(value):.6g}{' ' + self.unit if self.unit else ''}"


@dataclass(frozen=True)
class ScanSpace:
    """The scans of a program; each group (one scan, or scans in lockstep) is one dimension."""

    axes: tuple[ScanAxis, ...]
    groups: tuple[tuple[int, ...], ...]

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(len(self.axes[g[0]].values) for g in self.groups)

    @property
    def count(self) -> int:
        return math.prod(self.shape)

    def position(self, index: int) -> tuple[int, ...]:
        """Position of point `index` along each dimension; the first declared varies slowest."""
        out = []
        for size in reversed(self.shape):  # C order, as numpy.unravel_index
            index, at = divmod(index, size)
            out.append(at)
        return tuple(reversed(out))

    def point(self, index: int) -> dict[str, float]:
        """The SI value of every scanned name at point `index`."""
        if not 0 <= index < self.count:
            raise IndexError(f"point {index} is outside 0..{self.count - 1}")
        values = {}
        for group, at in zip(self.groups, self.position(index)):
            for k in group:
                values[self.axes[k].name] = self.axes[k].values[at]
        return values

    def label(self, values: dict[str, float]) -> str:
        """`t = 1.4 us, d = 3 um`: how errors and progress name a point."""
        return ", ".join(a.describe(values[a.name]) for a in self.axes if a.name in values)


def resolve_scans(source: ast.SourceFile, diags: list[Diagnostic]) -> ScanSpace | None:
    """The scans declared in `source` (None if there are none); problems go to `diags`."""
    decls = [i for i in source.items if isinstance(i, ast.ScanDecl)]
    if not decls:
        for lock in (i for i in source.items if isinstance(i, ast.LockstepDecl)):
            diags.append(error("`scan lockstep` names scans, but none is declared", lock.span))
        return None
    axes: list[ScanAxis] = []
    for decl in decls:
        if any(a.name == decl.target.name for a in axes):
            diags.append(error(f"`{decl.target.name}` is scanned twice", decl.target.span))
            continue
        if decl.target.name in units.UNITS:
            diags.append(error(f"`{decl.target.name}` is a unit and cannot be a scan's name", decl.target.span))
            continue
        axis = _axis(decl, diags)
        if axis is not None:
            axes.append(axis)
    if not axes:
        return None
    return ScanSpace(tuple(axes), _groups(source, axes, diags))


def _axis(decl: ast.ScanDecl, diags: list[Diagnostic]) -> ScanAxis | None:
    try:
        if isinstance(decl.values, ast.ScanList):
            quantities = [_constant(e) for e in decl.values.items]
            first = decl.values.items[0]
        else:
            quantities = _range(decl.values)
            first = decl.values.low
    except EvalError as exc:
        diags.append(exc.diagnostic)
        return None
    dim = quantities[0].dim
    for q, expr in zip(quantities, _items(decl.values)):
        if q.dim != dim:
            diags.append(error(f"every value of a scan needs the same kind: expected {units.kind_name(dim)}, "
                               f"got {q.kind}", expr.span))
            return None
    spacing = "listed" if isinstance(decl.values, ast.ScanList) else \
        (decl.values.spacing.name if decl.values.spacing else "linear")
    return ScanAxis(decl.target.name, tuple(float(q.value) for q in quantities), dim,
                    _display_unit(first, dim), decl.span, spacing, decl.target.span)


def _items(values) -> list[ast.Expr]:
    return list(values.items) if isinstance(values, ast.ScanList) else [values.low, values.high]


def _constant(expr: ast.Expr) -> Quantity:
    """Scan values are written with numbers and units only, so points exist before names do."""
    try:
        return evaluate(expr, Scope())
    except EvalError as exc:
        if exc.diagnostic.message.startswith("unknown name"):
            raise EvalError(error("a scan's values are written with numbers and units only", expr.span,
                                  "write the value itself, e.g. `0 us .. 2 us points 21`")) from None
        raise


def _range(spec: ast.ScanRange) -> list[Quantity]:
    low, high, count = _constant(spec.low), _constant(spec.high), _constant(spec.count)
    if low.dim != high.dim:
        raise EvalError(error(f"the ends of a scan range differ in kind: {low.kind} and {high.kind}", spec.span))
    n = count.value
    if count.dim != DIMENSIONLESS or n != int(n) or not 1 <= n <= MAX_POINTS:
        raise EvalError(error(f"`points` needs a whole number from 1 to {MAX_POINTS}", spec.count.span))
    spacing = spec.spacing.name if spec.spacing else "linear"
    if spacing not in SPACINGS:
        raise EvalError(error(f"unknown spacing `{spacing}`", spec.spacing.span,
                              did_you_mean(spacing, SPACINGS) or "use `linear` or `log`"))
    import numpy as np  # here: checking a file without ranges stays free of numpy
    if spacing == "log":
        if low.value * high.value <= 0:
            raise EvalError(error("a log-spaced scan needs both ends nonzero and of one sign", spec.span))
        values = np.geomspace(low.value, high.value, int(n))
    else:
        values = np.linspace(low.value, high.value, int(n))
    return [Quantity(float(v), low.dim) for v in values]


def _display_unit(expr: ast.Expr, dim: tuple[int, ...]) -> str:
    """The unit the author wrote (`us` in `0 us .. 2 us`), else the usual one for the kind."""
    if isinstance(expr, ast.WithUnit) and units.UNITS[expr.unit][1] == dim:
        return expr.unit
    if isinstance(expr, ast.Neg):
        return _display_unit(expr.operand, dim)
    return units.PREFERRED_UNIT.get(dim, "")


def _groups(source: ast.SourceFile, axes: list[ScanAxis], diags: list[Diagnostic]) -> tuple[tuple[int, ...], ...]:
    """One dimension per scan, except that scans in one lockstep group share a dimension."""
    index = {a.name: k for k, a in enumerate(axes)}
    locked: dict[int, tuple[int, ...]] = {}
    for lock in (i for i in source.items if isinstance(i, ast.LockstepDecl)):
        members = _lock_members(lock, axes, index, locked, diags)
        for k in members:
            locked[k] = tuple(members)
    groups: list[tuple[int, ...]] = []
    for k in range(len(axes)):
        group = locked.get(k, (k,))
        if group not in groups:
            groups.append(group)
    return tuple(groups)


def _lock_members(lock: ast.LockstepDecl, axes, index, locked, diags: list[Diagnostic]) -> list[int]:
    members: list[int] = []
    for ident in lock.names:
        k = index.get(ident.name)
        if k is None:
            diags.append(error(f"`{ident.name}` is not a scan", ident.span, did_you_mean(ident.name, index)))
        elif k in locked or k in members:
            diags.append(error(f"`{ident.name}` is already in a lockstep group", ident.span))
        elif members and len(axes[k].values) != len(axes[members[0]].values):
            diags.append(error(f"scans in lockstep need as many values each: `{ident.name}` has "
                               f"{len(axes[k].values)}, `{axes[members[0]].name}` has "
                               f"{len(axes[members[0]].values)}", ident.span))
        else:
            members.append(k)
    return members


# ---- binding one point ------------------------------------------------------
def bind_point(space: ScanSpace | None, values: dict[str, float], scope: Scope) -> None:
    """Put the point's plain scanned names into `scope`, pinned so a rig `let` cannot undo them."""
    if space is None:
        return
    for axis in space.axes:
        scope.values[axis.name] = Quantity(values[axis.name], axis.dim)
    scope.pinned = frozenset(a.name for a in space.axes if "." not in a.name)


def override_rig(rig: ast.RigDef, space: ScanSpace | None, diags: list[Diagnostic]) -> ast.RigDef:
    """The rig with each scanned ``drive.key`` / ``species.key`` replaced by the scanned name."""
    if space is None:
        return rig
    from .rig import SPECIES_KEYS, drive_keys
    for axis in (a for a in space.axes if "." in a.name):
        owner, key = axis.name.split(".", 1)
        drives = {d.name.name: d for d in rig.drives}
        species = {s.name.name: s for s in rig.species}
        if owner in drives:
            schema, decl, field_name = drive_keys(drives[owner].kind.name), drives[owner], "drives"
        elif owner in species:
            schema, decl, field_name = SPECIES_KEYS, species[owner], "species"
        else:
            diags.append(error(f"no drive or species `{owner}` in rig `{rig.name.name}`", axis.span,
                               did_you_mean(owner, list(drives) + list(species))))
            continue
        if key not in schema:
            diags.append(error(f"`{owner}` has no property `{key}`", axis.span,
                               did_you_mean(key, schema) or f"allowed: {', '.join(sorted(schema))}"))
            continue
        rig = replace(rig, **{field_name: tuple(_with_prop(d, key, axis) if d is decl else d
                                                for d in getattr(rig, field_name))})
    return rig


def _with_prop(decl, key: str, axis: ScanAxis):
    value = ast.NameRef(axis.name, axis.span)
    props = [p for p in decl.props if p.key_name != key]
    props.append(ast.Prop(key, value, _key_part(axis.target_span or axis.span, key)))
    return replace(decl, props=tuple(props))


def _key_part(span: Span, key: str) -> Span:
    """The span of `key` at the end of a scanned `owner.key` (a property's key span is the start
    of the property's own)."""
    if span.end_line != span.line or span.end - span.start < len(key):
        return span
    shift = span.end - span.start - len(key)
    return span._replace(column=span.column + shift, start=span.start + shift)


# ---- free parameters (for the optimiser) ----------------------------------------
@dataclass(frozen=True)
class FreeParam:
    """A value the optimiser may vary: bounds and start (SI), the unit it was written in."""

    name: str
    low: float
    high: float
    start: float
    dim: tuple[int, ...]
    unit: str
    span: Span


def resolve_free(source: ast.SourceFile, taken: set[str], diags: list[Diagnostic]) -> tuple[FreeParam, ...]:
    """The `free` declarations of `source` (names in `taken` are already scans)."""
    out: list[FreeParam] = []
    for decl in (i for i in source.items if isinstance(i, ast.FreeDecl)):
        name = decl.name.name
        if name in taken or any(f.name == name for f in out) or name in units.UNITS:
            diags.append(error(f"`{name}` is already declared, or is a unit", decl.name.span))
            continue
        try:
            low, high = _constant(decl.low), _constant(decl.high)
            start = _constant(decl.start) if decl.start is not None else Quantity((low.value + high.value) / 2,
                                                                                   low.dim)
        except EvalError as exc:
            diags.append(exc.diagnostic)
            continue
        if not low.dim == high.dim == start.dim:
            diags.append(error("the bounds and start of a free value need one kind", decl.span))
        elif not low.value < high.value or not low.value <= start.value <= high.value:
            diags.append(error("a free value needs low < high and the start between them", decl.span))
        else:
            out.append(FreeParam(name, low.value, high.value, start.value, low.dim,
                                 _display_unit(decl.low, low.dim), decl.span))
    return tuple(out)


def bind_free(free: tuple[FreeParam, ...], values: dict[str, float] | None, scope: Scope) -> None:
    """Bind each free value (its start unless `values` gives it), pinned like a scan."""
    for param in free:
        value = (values or {}).get(param.name, param.start)
        scope.values[param.name] = Quantity(value, param.dim)
    scope.pinned = scope.pinned | frozenset(p.name for p in free)
