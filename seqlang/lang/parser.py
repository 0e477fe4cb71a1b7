"""Parse seqlang text into the syntax tree of :mod:`seqlang.lang.syntax`.

The grammar lives in ``grammar/seqlang.lark`` and ships inside the package.
Syntax nodes are built during the LALR parse itself (no intermediate lark tree):
each grammar rule has a method of the same name on :class:`_Builder`, called
when the parser reduces that rule, so the parse needs no recursion however
deeply the text nests. Lark's exceptions are translated here into
:class:`SeqlangError`; callers never see lark types. Parsing stops at the first
syntax error.

>>> parse_text("let t = 2 ns", "x.seq").items[0].name.name
't'
"""
from __future__ import annotations

import contextlib
import functools
import gc
import sys
from importlib import resources

from lark import Lark, Token, Transformer, Tree, v_args
from lark.exceptions import UnexpectedInput
# The LALR driver is lark's own; we only hand it our reduce callbacks (see _callbacks).
from lark.parsers.lalr_analysis import Reduce
from lark.parsers.lalr_parser import _Parser as _LalrDriver
from lark.visitors import _vargs_meta

from . import syntax as ast
from . import lalr, source_text
from .diagnostics import PACKED_SPAN, SOURCES, SeqlangError, Span, error, file_index, span_packer
from .grammar_cache import cached_lark
from .syntax_errors import syntax_error, token_span as _token_span

# Blocks (`{ }` bodies) and expression operators nest at most this deep; deeper text
# would exhaust Python's recursion in the later passes, which walk the tree recursively.
MAX_NESTING = 100
# Rules whose nodes count one level of nesting.
_NESTING_RULES = frozenset({"body", "add", "sub", "mul", "div", "pow", "neg", "with_unit", "call", "tuple",
                            "kwtuple", "range"})


@functools.lru_cache(maxsize=1)
def _lark() -> Lark:
    text = resources.files("seqlang").joinpath("grammar/seqlang.lark").read_text("utf-8")
    # Not lark's own cache: it unpickles a file from the shared temporary directory, where
    # a planted file could run code. Ours is JSON in a private directory (grammar_cache).
    return cached_lark(text, lambda: Lark(text, parser="lalr", maybe_placeholders=True, cache=False))


def parse_text(text: str, path: str) -> ast.SourceFile:
    """Parse one file's text; raise :class:`SeqlangError` on a syntax error.

    Line ends are normalised first (see :mod:`seqlang.lang.source_text`); spans,
    the stored text and the error printer all refer to the normalised text.
    """
    text = source_text.normalise(text)
    SOURCES.add(path, text)
    lark = _lark()
    table = _fast_table(lark)[0]
    fast = lalr.tables(lark, table)
    with cyclic_gc_paused():
        if fast is not None:
            callbacks = _callbacks(lark, _Builder(path))
            reducers = [None if callbacks[rule] is _pass_through else callbacks[rule] for rule in fast.rules]
            try:
                return _source_file(path, text, lalr.parse(text, fast, reducers))
            except lalr.Unsupported:
                pass  # a syntax error: lark's own driver says what and where
        driver = _LalrDriver(table, _callbacks(lark, _Builder(path)))
        try:
            result = driver.parse(lark.parser._make_lexer_thread(text), "start")
        except UnexpectedInput as exc:
            raise SeqlangError([syntax_error(exc, text, path, lark)]) from None
    return _source_file(path, text, result)


def _source_file(path: str, text: str, result: "_Reduced") -> ast.SourceFile:
    return ast.SourceFile(path, text, tuple(result[VALUE].children))


@contextlib.contextmanager
def cyclic_gc_paused():
    """Pause Python's cycle collector while a large tree of (acyclic) objects is built.

    Its full passes walk every live object, so with 10⁶ new nodes they would make
    building the tree grow faster than linearly; reference counting still frees
    everything that is dropped. On the way out the objects built meanwhile go straight
    to the oldest generation (freeze, then unfreeze: two list splices), where the
    collector looks only in its rare full passes: else the next young pass would walk
    all of them once more (a quarter of a second per 10⁵ pulses)."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.freeze()
            gc.unfreeze()
            gc.enable()


def parse_file(path: str) -> ast.SourceFile:
    """Read and parse a file; a missing file is an error without a span."""
    with open(path, encoding="utf-8") as handle:
        return parse_text(handle.read(), path)


# ---- reduce callbacks: positions, child filtering, nesting --------------------
# What a reduction leaves on the value stack: [value, first token, last token, depth] —
# the value, the first and last token of the text it covers (None for empty rules) and
# its nesting depth. A plain list rather than an object: a generated program makes a
# dozen per line, and a list display is several times cheaper than calling a class.
# It also serves as the ``meta`` of ``@v_args(meta=True)`` builder methods.
_Reduced = list
VALUE, FIRST, LAST, DEPTH = 0, 1, 2, 3


_DROP, _KEEP, _SPLICE = 0, 1, 2


def _callbacks(lark: Lark, builder: "_Builder") -> dict:
    """One callback per grammar rule, as lark's LALR driver expects them."""
    return {rule: _reducer(plan, builder) for rule, plan in _plans(lark)}


class _TableRule:
    """A rule as lark's LALR driver reads it from the table (``origin.name``, ``expansion``),
    hashed and compared by identity: lark's own Rule and Token objects compare in Python
    code, which the driver would call at every step."""

    __slots__ = ("origin", "expansion")

    def __init__(self, rule):
        self.origin = _Name(sys.intern(str(rule.origin.name)))
        self.expansion = rule.expansion


class _Name:
    __slots__ = ("name",)

    def __init__(self, name: str):
        self.name = name


class _Table:
    """The parts of a parse table the driver reads, with plain-string keys."""

    __slots__ = ("states", "start_states", "end_states")

    def __init__(self, states, start_states, end_states):
        self.states, self.start_states, self.end_states = states, start_states, end_states


@functools.lru_cache(maxsize=1)
def _fast_table(lark: Lark) -> tuple[_Table, dict]:
    """Lark's parse table with plain keys, and the map from lark's rules to its rules."""
    table = lark.parser.parser._parse_table
    rules: dict = {}
    for actions in table.states.values():
        for action, arg in actions.values():
            if action is Reduce and arg not in rules:
                rules[arg] = _TableRule(arg)
    states = {state: {sys.intern(str(symbol)): (action, rules[arg] if action is Reduce else arg)
                      for symbol, (action, arg) in actions.items()}
              for state, actions in table.states.items()}
    return _Table(states, dict(table.start_states), dict(table.end_states)), rules


@functools.lru_cache(maxsize=1)
def _plans(lark: Lark) -> tuple:
    """Per rule: its name, what to do with each symbol, placeholders, how to build it, and
    what each child can be (see _child_kinds)."""
    plans = []
    table_rules = _fast_table(lark)[1]
    transparent = _transparent_rules(lark)
    children = _child_kinds(lark, transparent)
    for rule in lark.rules:
        if rule not in table_rules:
            continue  # a rule the parser never reduces
        name = rule.alias or rule.origin.name
        modes = [_DROP if sym.is_term and sym.filter_out
                 else _SPLICE if (not sym.is_term and sym.name.startswith("_") and sym.name not in transparent)
                 else _KEEP
                 for sym in rule.expansion]
        if name in transparent:
            plans.append((table_rules[rule], (name, (_KEEP,), (), "expand1", False, ())))
            continue
        nones = _placeholders(rule)
        kind = "splice" if name.startswith("_") else \
            "expand1" if rule.options.expand1 and not rule.alias else "node"
        plans.append((table_rules[rule], (name, tuple(modes), nones, kind, name in _NESTING_RULES,
                                          tuple(children(sym) for sym in rule.expansion))))
    return tuple(plans)


def _transparent_rules(lark: Lark) -> frozenset:
    """Inlined rules (``_stmt: pulse_stmt | wait_stmt ...``) whose every alternative is one kept
    symbol: splicing their one value equals passing it on, so they reduce with no call and
    their parents keep them like any other child (a statement line saves several steps)."""
    alternatives: dict = {}
    for rule in lark.rules:
        alternatives.setdefault(rule.origin.name, []).append(rule)
    found: set = set()
    while True:
        more = {name for name, rules in alternatives.items()
                if name.startswith("_") and name not in found
                and all(len(r.expansion) == 1 and not r.alias and not r.options.empty_indices
                        and _passes_on(r.expansion[0], found) for r in rules)}
        if not more:
            return frozenset(found)
        found |= more


def _passes_on(symbol, transparent: set) -> bool:
    """A kept terminal, a rule that builds one value, or a transparent rule."""
    if symbol.is_term:
        return not symbol.filter_out
    return not symbol.name.startswith("_") or symbol.name in transparent


_TOKEN, _REDUCED, _EITHER, _MAYBE_EMPTY = "token", "reduced", "either", "maybe empty"


def _child_kinds(lark: Lark, transparent: frozenset):
    """What a rule's child for `symbol` is on the value stack: always a token (a terminal), a
    reduction (a list), either (a rule that may pass a token on), or a reduction that may
    cover no text (its first and last token None)."""
    by_origin: dict = {}
    for rule in lark.rules:
        by_origin.setdefault(rule.origin.name, []).append(rule)

    def passes_token(rule, seen) -> bool:  # reduces with _pass_through, handing on a token
        if len(rule.expansion) != 1 or rule.alias or rule.options.empty_indices:
            return False
        name = rule.origin.name
        if name not in transparent and (not rule.options.expand1 or name.startswith("_")):
            return False  # it builds a node, or it is spliced (always a list)
        symbol = rule.expansion[0]
        return (not symbol.filter_out) if symbol.is_term else may_token(symbol.name, seen)

    def may_token(name, seen=frozenset()) -> bool:
        return name not in seen and any(passes_token(r, seen | {name}) for r in by_origin.get(name, ()))

    nullable: set = set()
    while True:
        more = {name for name, rules in by_origin.items() if name not in nullable and any(
            all(not s.is_term and s.name in nullable for s in r.expansion) for r in rules)}
        if not more:
            break
        nullable |= more

    def kind(symbol) -> str:
        if symbol.is_term:
            return _TOKEN
        if symbol.name in nullable:
            return _MAYBE_EMPTY
        return _EITHER if may_token(symbol.name) else _REDUCED
    return kind


def _placeholders(rule) -> tuple[int, ...]:
    """How many `None`s stand before each kept symbol (and at the end) for missing `[optional]`s."""
    empty = rule.options.empty_indices
    if not empty:
        return ()
    runs = [len(ones) for ones in "".join(str(int(b)) for b in empty).split("0")]
    return tuple(runs)


def _reducer(plan, builder: "_Builder"):
    name, modes, nones, kind, deepens, children = plan
    method = _builder_method(builder, name) if kind != "splice" else None
    if kind == "expand1" and modes == (_KEEP,) and not nones:
        return _pass_through          # `?rule: other`, the commonest reduction: nothing to do
    return _reducer_factory(plan)(method, builder, name)


@functools.lru_cache(maxsize=None)
def _reducer_factory(plan):
    """Python source for one rule's reduce callback, written out for its symbols (which are
    tokens, which are spliced, where placeholders go), compiled once per rule. The callback
    returns [value, first token, last token, depth] (see _Reduced)."""
    name, modes, nones, kind, deepens, children = plan
    size = len(modes)
    code = ["def make(method, builder, name):", "  def reduce(children):"]
    code.append(f"    {''.join(f'c{i}, ' for i in range(size))}= children" if size else "    pass")
    if not size or any(children[i] == _MAYBE_EMPTY for i in range(size)):
        code.append("    first, last = _ends(children)")
    else:
        code.append(f"    first = {_end_token(0, children[0], FIRST)}")
        code.append(f"    last = {_end_token(size - 1, children[-1], LAST)}")
    items, depths, fresh = [], [], True
    for index, mode in enumerate(modes):
        if nones and nones[index]:
            items.append("None, " * nones[index])
        if mode is _DROP:
            continue
        child = f"c{index}"
        if children[index] == _TOKEN:
            items.append(f"{child}, ")
            continue
        token_check = children[index] != _REDUCED
        value = f"({child} if {child}.__class__ is Token else {child}[{VALUE}])" if token_check else f"{child}[{VALUE}]"
        depths.append(f"(0 if {child}.__class__ is Token else {child}[{DEPTH}])" if token_check else f"{child}[{DEPTH}]")
        if mode is _SPLICE:
            if not items and not nones and fresh:   # a left-recursive list (`x*`): grow the child's own list
                code.append(f"    values = {child}[{VALUE}]")
                fresh = False
            else:
                items.append(f"*{child}[{VALUE}], ")
        else:
            items.append(f"{value}, ")
    if nones and nones[-1]:
        items.append("None, " * nones[-1])
    if fresh:
        code.append(f"    values = [{''.join(items)}]")
    elif items:
        code.append(f"    values.extend(({''.join(items)}))")
    code.append(f"    depth = {'max(' + ', '.join(depths) + ', 0)' if len(depths) > 1 else depths[0] if depths else '0'}")
    if kind == "splice":
        code.append("    return [values, first, last, depth]")
    else:
        if kind == "expand1":
            code.append("    if len(values) == 1:")
            code.append("      return [values[0], first, last, depth]")
        code.append(f"    out = [None, first, last, depth + {int(deepens)}]")
        if deepens:
            code.append(f"    if out[{DEPTH}] > MAX_NESTING:")
            code.append("      _too_deep(builder, out)")
        code.append(f"    out[{VALUE}] = method(out, values) if method is not None else Tree(name, values)")
        code.append("    return out")
    code.append("  return reduce")
    names = {"Token": Token, "Tree": Tree, "_ends": _ends, "MAX_NESTING": MAX_NESTING, "_too_deep": _too_deep}
    exec("\n".join(code), names)
    return names["make"]


def _end_token(index: int, child: str, end: int) -> str:
    """Source for child `index`'s first or last token (`end` FIRST or LAST)."""
    return f"c{index}" if child == _TOKEN else f"c{index}[{end}]" if child == _REDUCED else \
        f"(c{index} if c{index}.__class__ is Token else c{index}[{end}])"


def _too_deep(builder: "_Builder", out: _Reduced):
    raise SeqlangError([error(f"this nests more than {MAX_NESTING} levels deep (blocks and "
                              "operators inside each other)", builder._span(out),
                              "split it with `let` constants or `block`s")])


def _ends(children) -> tuple:
    """The first and last token of the text the children cover (None, None if none)."""
    first = last = None
    for child in children:
        first = child if child.__class__ is Token else child[FIRST]
        if first is not None:
            break
    for child in reversed(children):
        last = child if child.__class__ is Token else child[LAST]
        if last is not None:
            break
    return first, last


def _pass_through(children):
    return children[0]


def _builder_method(builder: "_Builder", name: str):
    """The builder's method for a rule, called as ``method(meta, children)``; None if it has none."""
    raw = getattr(type(builder), name, None)
    if raw is None:
        return None
    if getattr(raw, "visit_wrapper", None) is _vargs_meta:
        return raw.base_func.__get__(builder)
    bound = getattr(builder, name)
    return lambda meta, children: bound(children)


def _extent_packer(path: str):
    """``span(meta)``: the span of a reduction's extent, from its first and last token, in one
    call (no method binding, no second call to pack: a generated program makes a million)."""
    index, pack, new = file_index(path), PACKED_SPAN.pack, bytes.__new__
    empty = Span(path, 1, 1, 1, 1)

    def span(meta: _Reduced) -> Span:
        first, last = meta[FIRST], meta[LAST]
        if first is None:
            return empty
        return new(Span, pack(index, first.line, first.column, last.end_line, last.end_column,
                              first.start_pos, last.end_pos))
    return span


# ---- the Transformer: builds nodes, checks nothing --------------------------
class _Builder(Transformer):
    """Builds :mod:`syntax` nodes, one method per grammar rule (named after the rule or
    its ``-> alias``), called with the rule's children: tokens, values of inner rules
    and ``None`` for a missing ``[optional]``. ``@v_args(meta=True)`` methods also get
    the extent, which ``self._span(meta)`` turns into a :class:`Span`."""

    def __init__(self, path: str):
        super().__init__()
        self.path = path
        self._pack = span_packer(path)  # a dozen spans per line of a generated program
        self._span = _extent_packer(path)

    def _ident(self, token: Token) -> ast.Ident:
        # Interned: a long program repeats a few names many times, each copy ~50 bytes.
        return ast.Ident(sys.intern(str(token)), self._pack(
            token.line, token.column, token.end_line, token.end_column, token.start_pos, token.end_pos))

    # expressions
    @v_args(meta=True)
    def number(self, meta, children):
        return ast.Number(float(children[0]), self._span(meta))

    @v_args(meta=True)
    def bare_unit(self, meta, children):
        return ast.UnitRef(str(children[0]), self._span(meta))

    @v_args(meta=True)
    def name(self, meta, children):
        return ast.NameRef(str(children[0]), self._span(meta))

    @v_args(meta=True)
    def with_unit(self, meta, children):
        operand, unit = children
        return ast.WithUnit(operand, sys.intern(str(unit)), self._span(meta))

    def _binop(op):
        @v_args(meta=True)
        def build(self, meta, children):
            return ast.BinOp(op, children[0], children[1], self._span(meta))
        return build

    add, sub, mul, div, pow = _binop("+"), _binop("-"), _binop("*"), _binop("/"), _binop("^")

    @v_args(meta=True)
    def neg(self, meta, children):
        return ast.Neg(children[0], self._span(meta))

    @v_args(meta=True)
    def arg(self, meta, children):
        return ast.Arg(None, children[0], self._span(meta))

    @v_args(meta=True)
    def kwarg(self, meta, children):
        return ast.Arg(self._ident(children[0]), children[1], self._span(meta))

    @v_args(meta=True)
    def call(self, meta, children):
        args = tuple(c for c in children[1:] if c is not None)
        return ast.Call(self._ident(children[0]), args, self._span(meta))

    @v_args(meta=True)
    def tuple(self, meta, children):
        return ast.TupleExpr(tuple(children), self._span(meta))

    @v_args(meta=True)
    def range(self, meta, children):
        return ast.RangeExpr(children[0], children[1], self._span(meta))

    @v_args(meta=True)
    def level(self, meta, children):
        return ast.LevelExpr(str(children[0]), self._span(meta))

    @v_args(meta=True)
    def channel(self, meta, children):
        return ast.ChannelExpr(str(children[0]), self._span(meta))

    def kwitem(self, children):
        return (self._ident(children[0]), children[1])

    def kwtuple(self, children):
        return tuple(children)

    @v_args(meta=True)
    def state_pair(self, meta, children):
        return ast.StatePair(children[0], children[1], self._span(meta))

    @v_args(meta=True)
    def prop(self, meta, children):
        return ast.Prop(sys.intern(str(children[0])), children[1], self._span(meta))

    setting = prop

    # rig
    @v_args(meta=True)
    def species_def(self, meta, children):
        name, isotope, *props = children
        return ast.SpeciesDecl(self._ident(name), self._ident(isotope), tuple(props), self._span(meta))

    @v_args(meta=True)
    def drive_def(self, meta, children):
        name, kind, species, *props = children
        return ast.DriveDecl(self._ident(name), self._ident(kind), self._ident(species),
                             tuple(props), self._span(meta))

    @v_args(meta=True)
    def image_def(self, meta, children):
        return ast.ImageDecl(self._ident(children[0]), tuple(children[1:]), self._span(meta))

    @v_args(meta=True)
    def port_def(self, meta, children):
        _, name, channel, *props = children
        chan = ast.ChannelExpr(str(channel), _token_span(channel, self.path))
        return ast.PortDecl(self._ident(name), chan, tuple(props), self._span(meta))

    @v_args(meta=True)
    def rig_def(self, meta, children):
        name, *items = children
        pick = lambda cls: tuple(i for i in items if isinstance(i, cls))
        return ast.RigDef(self._ident(name), pick(ast.Prop), pick(ast.SpeciesDecl),
                          pick(ast.DriveDecl), pick(ast.ImageDecl), pick(ast.PortDecl),
                          pick(ast.LetStmt), self._span(meta))

    # array and sequence
    @v_args(meta=True)
    def let_stmt(self, meta, children):
        return ast.LetStmt(self._ident(children[0]), children[1], self._span(meta))

    @v_args(meta=True)
    def site_stmt(self, meta, children):
        name, species, position = children
        return ast.SiteStmt(self._ident(name), self._ident(species), position, self._span(meta))

    def name_list(self, children):
        return tuple(c if isinstance(c, ast.Indexed) else self._ident(c) for c in children)

    @v_args(meta=True)
    def indexed(self, meta, children):
        return ast.Indexed(self._ident(children[0]), tuple(children[1:]), self._span(meta))

    def index_one(self, children):
        return children[0]

    def index_span(self, children):
        return (children[0], children[1])

    def index_all(self, children):
        return None

    @v_args(meta=True)
    def lattice_def(self, meta, children):
        name, kind, *props = children
        return ast.LatticeDecl(self._ident(name), self._ident(kind), tuple(props), self._span(meta))

    @v_args(meta=True)
    def lattice_file(self, meta, children):
        name, path, *props = children
        return ast.LatticeFile(self._ident(name), str(path)[1:-1], _token_span(path, self.path), tuple(props),
                               self._span(meta))

    @v_args(meta=True)
    def fill_stmt(self, meta, children):
        targets, sources, *props = children
        return ast.FillStmt(targets, sources, tuple(props), self._span(meta))

    @v_args(meta=True)
    def group_stmt(self, meta, children):
        return ast.GroupStmt(self._ident(children[0]), children[1], self._span(meta))

    def body(self, children):
        return tuple(children)

    def targets(self, children):
        return children[0]

    @v_args(meta=True)
    def pulse_stmt(self, meta, children):
        drive, targets, *props = children
        return ast.PulseStmt(self._ident(drive), targets or (), tuple(props), self._span(meta))

    @v_args(meta=True)
    def wait_stmt(self, meta, children):
        return ast.WaitStmt(children[0], self._span(meta))

    def align(self, children):
        return self._ident(children[0])

    @v_args(meta=True)
    def together_stmt(self, meta, children):
        return ast.TogetherStmt(children[0], children[1], self._span(meta))

    @v_args(meta=True)
    def repeat_stmt(self, meta, children):
        return ast.RepeatStmt(children[0], children[1], self._span(meta))

    @v_args(meta=True)
    def do_stmt(self, meta, children):
        args = tuple(c for c in children[1:] if c is not None)
        return ast.DoStmt(self._ident(children[0]), args, self._span(meta))

    @v_args(meta=True)
    def image_stmt(self, meta, children):
        species, record, *props = children
        return ast.ImageStmt(self._ident(species), self._ident(record), tuple(props), self._span(meta))

    def switch_on(self, children):
        return True

    def switch_off(self, children):
        return False

    @v_args(meta=True)
    def switch_stmt(self, meta, children):
        return ast.SwitchStmt(self._ident(children[0]), children[1], self._span(meta))

    @v_args(meta=True)
    def set_stmt(self, meta, children):
        return ast.SetStmt(self._ident(children[0]), children[1], self._span(meta))

    @v_args(meta=True)
    def trigger_stmt(self, meta, children):
        return ast.TriggerStmt(self._ident(children[0]), tuple(children[1:]), self._span(meta))

    @v_args(meta=True)
    def field_stmt(self, meta, children):
        return ast.FieldStmt(self._ident(children[0]), children[1], children[2], self._span(meta))

    def move_to(self, children):
        return False

    def move_by(self, children):
        return True

    @v_args(meta=True)
    def move_stmt(self, meta, children):
        sites, relative, target, *props = children
        return ast.MoveStmt(sites, relative, target, tuple(props), self._span(meta))

    @v_args(meta=True)
    def param(self, meta, children):
        return ast.Param(self._ident(children[0]), children[1], self._span(meta))

    @v_args(meta=True)
    def block_def(self, meta, children):
        name, *rest = children
        params = tuple(p for p in rest[:-1] if p is not None)
        return ast.BlockDef(self._ident(name), params, rest[-1], self._span(meta))

    @v_args(meta=True)
    def sequence_def(self, meta, children):
        return ast.SequenceDef(self._ident(children[0]), children[1], self._span(meta))

    def named_state(self, children):
        return (self._ident(children[0]), False)

    def ket_state(self, children):
        return (self._ident(children[0]), True)

    def product_state(self, children):
        factors = tuple(self._ident(c) for c in children)
        first, last = factors[0].span, factors[-1].span
        span = first._replace(end_line=last.end_line, end_column=last.end_column, end=last.end)
        return (ast.Ident("*".join(f.name for f in factors), span), False, factors)

    @v_args(meta=True)
    def expect_stmt(self, meta, children):
        state, is_ket, *factors = children[1]
        return ast.ExpectStmt(children[0], state, is_ket, self._span(meta), tuple(children[2:]),
                              factors[0] if factors else ())

    # feed-forward
    @v_args(meta=True)
    def record_sel(self, meta, children):
        return ast.RecordSel(self._ident(children[0]), children[1], self._span(meta))

    @v_args(meta=True)
    def compare_cond(self, meta, children):
        left, op, right = children
        return ast.Compare(str(op), left, right, self._span(meta))

    @v_args(meta=True)
    def outcome_cond(self, meta, children):
        return ast.OutcomeIs(children[0], self._ident(children[1]), self._span(meta))

    def otherwise(self, children):
        return children[0]

    @v_args(meta=True)
    def when_stmt(self, meta, children):
        return ast.WhenStmt(children[0], children[1], children[2], self._span(meta))

    @v_args(meta=True)
    def use_stmt(self, meta, children):
        return ast.UseStmt(str(children[0])[1:-1], self._span(meta))

    @v_args(meta=True)
    def import_stmt(self, meta, children):
        return ast.ImportStmt(str(children[0])[1:-1], self._span(meta))

    # scans
    def scan_target(self, children):
        return self._ident(children[0])

    @v_args(meta=True)
    def scan_range(self, meta, children):
        low, high, count, spacing = children
        return ast.ScanRange(low, high, count, self._ident(spacing) if spacing is not None else None,
                             self._span(meta))

    @v_args(meta=True)
    def scan_list(self, meta, children):
        return ast.ScanList(tuple(children), self._span(meta))

    @v_args(meta=True)
    def scan_def(self, meta, children):
        return ast.ScanDecl(children[0], children[1], self._span(meta))

    @v_args(meta=True)
    def lockstep_def(self, meta, children):
        return ast.LockstepDecl(tuple(children), self._span(meta))

    @v_args(meta=True)
    def free_def(self, meta, children):
        name, low, high, start = children
        return ast.FreeDecl(self._ident(name), low, high, start, self._span(meta))
