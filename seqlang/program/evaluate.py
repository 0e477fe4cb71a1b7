"""Evaluate expressions to :class:`Quantity` values, checking units as it goes.

>>> from seqlang.lang.parser import parse_text
>>> let = parse_text("let t = 1 / (2 * 1 MHz)", "x.seq").items[0]
>>> evaluate(let.value, Scope()).value
5e-07
"""
from __future__ import annotations

import math
from contextvars import ContextVar
import sys
from dataclasses import dataclass, field
from typing import Callable

from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import Diagnostic, Span, did_you_mean, error
from ..lang.units import DIMENSIONLESS, Quantity


class EvalError(Exception):
    """An expression cannot be evaluated; carries the diagnostic."""

    def __init__(self, diagnostic: Diagnostic):
        super().__init__(diagnostic.message)
        self.diagnostic = diagnostic


@dataclass(frozen=True)
class SiteRef:
    """A block argument that names sites (a site or a group), not a number."""

    sites: tuple[str, ...]
    span: Span


@dataclass
class Scope:
    """Names visible to an expression; inner scopes shadow outer ones."""

    values: dict[str, object] = field(default_factory=dict)
    parent: "Scope | None" = None
    pinned: frozenset = frozenset()  # scanned names: a rig `let` of the same name gives way

    def lookup(self, name: str) -> object | None:
        scope: Scope | None = self
        while scope is not None:
            if name in scope.values:
                return scope.values[name]
            scope = scope.parent
        return None

    def names(self) -> set[str]:
        own = set(self.values)
        return own | (self.parent.names() if self.parent else set())

    def child(self) -> "Scope":
        return Scope({}, self)


# The largest finite float; results beyond it are refused where they arise.
FLOAT_MAX = sys.float_info.max
TOO_LARGE = f"(beyond ±{FLOAT_MAX:.2g}, the largest number a float holds)".replace("e+", "e")
# Whole powers of a quantity with units stay within this, so dimensions stay readable.
MAX_UNIT_POWER = 12
# Every coordinate of a site, a move or a trap lies within this of the origin: an array spans
# millimetres in a vacuum cell of centimetres (common practice), so farther is a mistake, and
# the squares of such lengths would overflow the geometry's arithmetic.
MAX_COORDINATE_M = 1.0


def within_reach(coords, span: Span, what: str = "this position") -> tuple:
    """`coords` (metres) if every one is within MAX_COORDINATE_M of the origin, else an error."""
    if any(not abs(c) <= MAX_COORDINATE_M for c in coords):
        raise EvalError(error(f"{what} is more than {MAX_COORDINATE_M:g} m from the origin on an axis; "
                              "an array spans millimetres", span, "check the unit (`um`, `mm`)"))
    return tuple(coords)


def _unary(fn: Callable[[float], float], angle_in: bool = False):
    def apply(q: Quantity, span: Span) -> Quantity:
        allowed = (DIMENSIONLESS, units.ANGLE) if angle_in else (DIMENSIONLESS,)
        if q.dim not in allowed:
            raise EvalError(error(f"expected a plain number, got {q.kind}", span))
        return Quantity(fn(q.value))
    return apply


def _exp(q: Quantity, span: Span) -> Quantity:
    if q.dim != DIMENSIONLESS:
        raise EvalError(error(f"expected a plain number, got {q.kind}", span))
    if q.value > math.log(FLOAT_MAX):
        raise EvalError(error(f"exp({q.value:.6g}) is too large {TOO_LARGE}", span,
                              f"the argument of `exp` must be below {math.log(FLOAT_MAX):.6g}"))
    return Quantity(math.exp(q.value))


def _log(q: Quantity, span: Span) -> Quantity:
    if q.dim != DIMENSIONLESS:
        raise EvalError(error(f"expected a plain number, got {q.kind}", span))
    if q.value == 0:
        raise EvalError(error("the logarithm of zero is minus infinity", span))
    if q.value < 0:
        raise EvalError(error("the logarithm of a negative value is not a real number", span))
    return Quantity(math.log(q.value))


def _sqrt(q: Quantity, span: Span) -> Quantity:
    if any(e % 2 for e in q.dim):
        raise EvalError(error(f"cannot take the square root of {q.kind}", span))
    if q.value < 0:
        raise EvalError(error("cannot take the square root of a negative value", span))
    return Quantity(math.sqrt(q.value), tuple(e // 2 for e in q.dim))


FUNCTIONS = {
    "sqrt": _sqrt,
    "sin": _unary(math.sin, True), "cos": _unary(math.cos, True), "tan": _unary(math.tan, True),
    "exp": _exp, "log": _log,
    "abs": lambda q, span: Quantity(abs(q.value), q.dim),
}


# ---- estimator functions and record values (feed-forward) ---------------------
def _inverse(fn: Callable[[float], float], name: str, low: float = -1.0, high: float = 1.0):
    """asin/acos: a plain number in [low, high] → an angle."""
    def apply(q: Quantity, span: Span) -> Quantity:
        if q.dim != DIMENSIONLESS:
            raise EvalError(error(f"expected a plain number, got {q.kind}", span))
        if not low <= q.value <= high:
            raise EvalError(error(f"`{name}` needs a value from {low:g} to {high:g}, got {q.value:.6g}", span,
                                  "clip the estimate first, e.g. `clip(x, -1, 1)`"))
        return Quantity(fn(q.value))
    return apply


def _plain(fn: Callable[[float], float]):
    def apply(q: Quantity, span: Span) -> Quantity:
        if q.dim != DIMENSIONLESS:
            raise EvalError(error(f"expected a plain number, got {q.kind}", span))
        return Quantity(float(fn(q.value)))
    return apply


FUNCTIONS.update({
    "asin": _inverse(math.asin, "asin"), "acos": _inverse(math.acos, "acos"), "atan": _plain(math.atan),
    "round": _plain(round), "floor": _plain(math.floor), "ceil": _plain(math.ceil),
})


def _same_dims(values: list[Quantity], name: str, span: Span) -> None:
    if len({q.dim for q in values}) > 1:
        raise EvalError(error(f"`{name}` needs values of one kind, got "
                              + " and ".join(sorted({q.kind for q in values})), span))


def _atan2(values: list[Quantity], span: Span) -> Quantity:
    _same_dims(values, "atan2", span)
    return Quantity(math.atan2(values[0].value, values[1].value))


def _clip(values: list[Quantity], span: Span) -> Quantity:
    _same_dims(values, "clip", span)
    x, low, high = values
    if low.value > high.value:
        raise EvalError(error("`clip(x, low, high)` needs low <= high", span))
    return Quantity(min(max(x.value, low.value), high.value), x.dim)


def _extreme(pick):
    def apply(values: list[Quantity], span: Span) -> Quantity:
        _same_dims(values, "min/max", span)
        return Quantity(pick(q.value for q in values), values[0].dim)
    return apply


# name → (number of values, or None for two or more; function of the list of values)
MULTI_FUNCTIONS = {"atan2": (2, _atan2), "clip": (3, _clip), "min": (None, _extreme(min)),
                   "max": (None, _extreme(max))}
RECORD_FUNCTIONS = ("bright", "fraction", "outcome")
# Set by the resolver while it evaluates a statement once per key of an image record:
# a function (call expression, scope) → Quantity. None everywhere else.
RECORD_VALUES: ContextVar = ContextVar("record_values", default=None)


@dataclass(frozen=True)
class Deferred:
    """A `let` whose value depends on an image record: evaluated where it is used, per key."""

    expr: ast.Expr
    scope: "Scope"


def _record_call(expr: ast.Call, scope: Scope) -> Quantity:
    reader = RECORD_VALUES.get()
    if reader is None:
        raise EvalError(error(f"`{expr.func.name}(…)` reads an image record; only pulse parameters and `when` "
                              "conditions can use one", expr.span,
                              "a record can set a pulse's phase, area, rabi or detuning"))
    return reader(expr, scope)


def _record_sel(expr: ast.RecordSel, scope: Scope) -> Quantity:
    raise EvalError(error(f"`{expr.record.name}[…]` selects sites of a record; it is not a number", expr.span,
                          "count it: `bright(…)`, `fraction(…)` or, for one site, `outcome(…)`"))


def evaluate(expr: ast.Expr, scope: Scope) -> Quantity:
    """Evaluate to a Quantity; raise :class:`EvalError` with a diagnostic."""
    value = evaluate_any(expr, scope)
    if not isinstance(value, Quantity):
        raise EvalError(error(f"expected a number, got {_what(value)}", expr.span))
    return value


def evaluate_any(expr: ast.Expr, scope: Scope) -> object:
    """Evaluate to a Quantity, a tuple of Quantities, or a SiteRef."""
    handler = _HANDLERS.get(type(expr))
    if handler is None:
        raise EvalError(error("this is not a value that can be computed", expr.span))
    value = handler(expr, scope)
    if isinstance(value, Quantity):
        _require_finite(value, expr)
    return value


def _require_finite(q: Quantity, expr: ast.Expr) -> None:
    """Last check on every sub-expression: a finite real number, or an error at its span."""
    if isinstance(q.value, complex):
        raise EvalError(error("this value is not a real number", expr.span))
    if not math.isfinite(q.value):
        raise EvalError(error(f"this value is not a finite number {TOO_LARGE}", expr.span))


def _number(expr: ast.Number, scope: Scope) -> Quantity:
    if not math.isfinite(expr.value):
        raise EvalError(error(f"this number is too large {TOO_LARGE}", expr.span))
    return Quantity(expr.value)


def _unit(expr: ast.UnitRef, scope: Scope) -> Quantity:
    factor, dim = units.UNITS[expr.unit]
    return Quantity(factor, dim)


def _name(expr: ast.NameRef, scope: Scope) -> object:
    value = scope.lookup(expr.name)
    if value is None:
        raise EvalError(error(f"unknown name `{expr.name}`", expr.span,
                              did_you_mean(expr.name, scope.names())))
    if isinstance(value, Deferred):
        return evaluate_any(value.expr, value.scope)
    return value


def _with_unit(expr: ast.WithUnit, scope: Scope) -> object:
    factor, dim = units.UNITS[expr.unit]
    number = expr.operand
    if number.__class__ is ast.Number:  # `12 deg`, most values written: the same product, directly
        value = number.value * factor
        if math.isfinite(number.value) and math.isfinite(value):
            return Quantity(value, dim)
    operand = evaluate_any(expr.operand, scope)
    if isinstance(operand, tuple):
        return tuple(_in_range(q * Quantity(factor, dim), f"this value in {expr.unit}", expr.span)
                     for q in operand)
    if not isinstance(operand, Quantity):
        raise EvalError(error(f"a unit cannot follow {_what(operand)}", expr.span))
    if operand.dim != DIMENSIONLESS:
        raise EvalError(error(f"`{expr.unit}` follows a value that already has units", expr.unit_span))
    value = operand * Quantity(factor, dim)
    if math.isfinite(value.value):  # the message is formatted only when it is needed
        return value
    return _in_range(value, f"this value in {expr.unit}", expr.span)


def _in_range(q: Quantity, what: str, span: Span) -> Quantity:
    """`q` if finite; else an error naming the operation that overflowed."""
    if not math.isfinite(q.value):
        raise EvalError(error(f"{what} is too large {TOO_LARGE}", span))
    return q


_OPERATION = {"+": "sum", "-": "difference", "*": "product", "/": "quotient"}


def _binop(expr: ast.BinOp, scope: Scope) -> Quantity:
    left, right = evaluate(expr.left, scope), evaluate(expr.right, scope)
    if expr.op in "+-":
        if left.dim != right.dim:
            raise EvalError(error(f"cannot {'add' if expr.op == '+' else 'subtract'} "
                                  f"{right.kind} and {left.kind}", expr.span))
        result = left + right if expr.op == "+" else left - right
    elif expr.op == "*":
        result = left * right
    elif expr.op == "/":
        if right.value == 0:
            raise EvalError(error("division by zero", expr.right.span))
        result = left / right
    else:
        return _power(left, right, expr)
    return _in_range(result, f"this {_OPERATION[expr.op]}", expr.span)


def _power(base: Quantity, exponent: Quantity, expr: ast.BinOp) -> Quantity:
    if exponent.dim != DIMENSIONLESS:
        raise EvalError(error(f"an exponent must be a plain number, got {exponent.kind}", expr.right.span))
    whole = exponent.value == int(exponent.value)
    if base.dim != DIMENSIONLESS and whole and abs(exponent.value) > MAX_UNIT_POWER:
        raise EvalError(error(f"a quantity with units can be raised to powers from -{MAX_UNIT_POWER} "
                              f"to {MAX_UNIT_POWER} only", expr.right.span))
    if base.value < 0 and not whole:
        raise EvalError(error("a negative number to a fractional power is not a real number", expr.span))
    if base.value == 0 and exponent.value < 0:
        raise EvalError(error("zero to a negative power is infinite (a division by zero)", expr.span))
    try:
        result = base.power(exponent.value)
    except ValueError as exc:
        raise EvalError(error(str(exc), expr.span)) from None
    except OverflowError:
        raise EvalError(error(f"this power is too large {TOO_LARGE}", expr.span)) from None
    return _in_range(result, "this power", expr.span)


def _neg(expr: ast.Neg, scope: Scope) -> Quantity:  # finite in, finite out
    return -evaluate(expr.operand, scope)


def _call(expr: ast.Call, scope: Scope) -> Quantity:
    if expr.func.name in RECORD_FUNCTIONS:
        return _record_call(expr, scope)
    if expr.func.name in MULTI_FUNCTIONS:
        return _multi_call(expr, scope)
    fn = FUNCTIONS.get(expr.func.name)
    if fn is None:
        raise EvalError(error(f"unknown function `{expr.func.name}`", expr.func.span,
                              did_you_mean(expr.func.name, [*FUNCTIONS, *MULTI_FUNCTIONS, *RECORD_FUNCTIONS])))
    if len(expr.args) != 1 or expr.args[0].name is not None:
        raise EvalError(error(f"`{expr.func.name}` takes one value", expr.span))
    return fn(evaluate(expr.args[0].value, scope), expr.span)


def _multi_call(expr: ast.Call, scope: Scope) -> Quantity:
    count, fn = MULTI_FUNCTIONS[expr.func.name]
    if any(a.name is not None for a in expr.args) or (len(expr.args) != count if count else len(expr.args) < 2):
        raise EvalError(error(f"`{expr.func.name}` takes {count or 'two or more'} values", expr.span))
    return fn([evaluate(a.value, scope) for a in expr.args], expr.span)


def _tuple(expr: ast.TupleExpr, scope: Scope) -> tuple:
    return tuple(evaluate(item, scope) for item in expr.items)


def _what(value: object) -> str:
    if isinstance(value, tuple):
        return "a list of values"
    if isinstance(value, SiteRef):
        return "a site name"
    return "something else"


_HANDLERS = {
    ast.Number: _number, ast.UnitRef: _unit, ast.NameRef: _name, ast.WithUnit: _with_unit,
    ast.BinOp: _binop, ast.Neg: _neg, ast.Call: _call, ast.TupleExpr: _tuple, ast.RecordSel: _record_sel,
}


# ---- kind checks -------------------------------------------------------------
def expect_kind(q: Quantity, dim: tuple[int, ...], span: Span) -> float:
    """The SI value of q if it has the wanted dimension, else an EvalError.

    A plain number is accepted as an angle in radians (common practice).
    """
    if q.dim == dim or (dim == units.ANGLE and q.dim == DIMENSIONLESS):
        return q.value
    hint = None
    if q.dim == DIMENSIONLESS and dim in units.PREFERRED_UNIT:
        hint = f"add a unit, e.g. `{_example(q.value)} {units.PREFERRED_UNIT[dim]}`"
    raise EvalError(error(f"expected {units.kind_name(dim)}, got {q.kind}", span, hint))


def _example(value: float) -> str:
    return f"{value:g}"
