"""Read ``key value`` properties against a declared schema.

A schema maps each allowed key to a reader; unknown keys, repeated keys and
missing required keys become diagnostics, and reading goes on so that every
mistake in a declaration is reported in one run.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Mapping

from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import Diagnostic, Span, did_you_mean, error
from .evaluate import EvalError, Scope, evaluate, expect_kind

Reader = Callable[[ast.Expr, Scope], object]


@dataclass(frozen=True)
class Key:
    """One allowed property: how to read it, its default, and words for help."""

    reader: Reader
    default: object = None
    required: bool = False
    doc: str = ""


def read_props(props: tuple[ast.Prop, ...], schema: dict[str, Key], scope: Scope,
               owner: str, owner_span: Span, diags: list[Diagnostic]) -> dict[str, object]:
    """Values for every schema key (defaults filled in); problems go to `diags`."""
    values: dict[str, object] = {}
    seen: dict[str, ast.Prop] = {}
    for prop in props:
        key = prop.key_name
        if key not in schema:
            diags.append(error(f"unknown property `{key}` for {owner}", prop.key.span,
                               did_you_mean(key, schema) or f"allowed: {', '.join(sorted(schema))}"))
            continue
        if key in seen:
            diags.append(error(f"`{key}` is given twice", prop.key.span))
            continue
        seen[key] = prop
        try:
            values[key] = schema[key].reader(prop.value, scope)
        except EvalError as exc:
            diags.append(_naming_key(exc.diagnostic, key))
            # The default keeps later checks working on a number, never on None.
            values[key] = schema[key].default
    for key, spec in schema.items():
        if key not in values:
            if spec.required:
                diags.append(error(f"{owner} needs `{key}`", owner_span,
                                   f"add `{key} ...` ({spec.doc})" if spec.doc else None))
            values[key] = spec.default
    values["__spans__"] = KeySpans(seen)
    return values


class KeySpans(Mapping):
    """Key → the span where it is written, built only when a message asks for it."""

    __slots__ = ("_props",)

    def __init__(self, props: dict[str, ast.Prop]):
        self._props = props

    def __getitem__(self, key: str) -> Span:
        return self._props[key].key.span

    def __iter__(self):
        return iter(self._props)

    def __len__(self) -> int:
        return len(self._props)


def _naming_key(diagnostic: Diagnostic, key: str) -> Diagnostic:
    """"the value cannot be negative" says more as "`latency` cannot be negative"."""
    if not diagnostic.message.startswith("the value "):
        return diagnostic
    message = f"`{key}` " + diagnostic.message[len("the value "):]
    return Diagnostic(diagnostic.severity, message, diagnostic.span, diagnostic.hint)


# ---- readers -----------------------------------------------------------------
def quantity(dim: tuple[int, ...]) -> Reader:
    def read(expr: ast.Expr, scope: Scope) -> float:
        return expect_kind(evaluate(expr, scope), dim, expr.span)
    return read


duration = quantity(units.DURATION)
frequency = quantity(units.FREQUENCY)
length = quantity(units.LENGTH)
temperature = quantity(units.TEMPERATURE)
angle = quantity(units.ANGLE)


def positive(reader: Reader, what: str = "value") -> Reader:
    def read(expr: ast.Expr, scope: Scope) -> float:
        value = reader(expr, scope)
        if not value > 0:
            raise EvalError(error(f"the {what} must be positive", expr.span))
        return value
    return read


def non_negative(reader: Reader, what: str = "value") -> Reader:
    def read(expr: ast.Expr, scope: Scope) -> float:
        value = reader(expr, scope)
        if value < 0:
            raise EvalError(error(f"the {what} cannot be negative", expr.span))
        return value
    return read


def early_by(what: str, why: str) -> Reader:
    """A time an output is shifted or held open by (a latency, a gate's lead or lag):
    non-negative and at most MAX_LATENCY_S; `why` says what a longer one would do."""
    def read(expr: ast.Expr, scope: Scope) -> float:
        value = non_negative(duration)(expr, scope)  # "`latency` cannot be negative", as other keys
        if value > MAX_LATENCY_S:
            raise EvalError(error(f"a {what} of {value:g} s is longer than {MAX_LATENCY_S:g} s; {why}", expr.span,
                                  f"output {what}s are nanoseconds to milliseconds (common practice)"))
        return value
    return read


latency = early_by("latency", "the whole table is shifted by the largest latency")


MAX_LATENCY_S = 1.0


def fraction(expr: ast.Expr, scope: Scope) -> float:
    """A plain number or percentage between 0 and 1."""
    value = expect_kind(evaluate(expr, scope), units.DIMENSIONLESS, expr.span)
    if not 0.0 <= value <= 1.0:
        raise EvalError(error("expected a fraction between 0 and 100 %", expr.span))
    return value


def integer(low: int, high: int) -> Reader:
    def read(expr: ast.Expr, scope: Scope) -> int:
        value = expect_kind(evaluate(expr, scope), units.DIMENSIONLESS, expr.span)
        if value != int(value) or not low <= value <= high:
            raise EvalError(error(f"expected a whole number from {low} to {high}", expr.span))
        return int(value)
    return read


def choice(*options: str) -> Reader:
    def read(expr: ast.Expr, scope: Scope) -> str:
        if isinstance(expr, ast.NameRef) and expr.name in options:
            return expr.name
        written = expr.name if isinstance(expr, ast.NameRef) else "this"
        raise EvalError(error(f"expected one of {', '.join(options)}", expr.span,
                              did_you_mean(written, options)))
    return read


def channel(expr: ast.Expr, scope: Scope) -> str:
    if isinstance(expr, ast.ChannelExpr):
        return expr.text
    raise EvalError(error("expected a sequencer output such as `awg1.2` or `ttl.4`", expr.span))


def frequency_range(expr: ast.Expr, scope: Scope) -> tuple[float, float]:
    if not isinstance(expr, ast.RangeExpr):
        raise EvalError(error("expected a range such as `-5 MHz .. 5 MHz`", expr.span))
    low, high = frequency(expr.low, scope), frequency(expr.high, scope)
    if low > high:
        raise EvalError(error("the lower end of the range is above the upper end", expr.span))
    return (low, high)


def any_range(expr: ast.Expr, scope: Scope):
    if not isinstance(expr, ast.RangeExpr):
        raise EvalError(error("expected a range such as `0 A .. 5 A`", expr.span))
    low, high = evaluate(expr.low, scope), evaluate(expr.high, scope)
    if low.dim != high.dim:
        raise EvalError(error(f"the range mixes {low.kind} and {high.kind}", expr.span))
    return (low.value, high.value, low.dim)


UNBOUNDED = (-math.inf, math.inf)
