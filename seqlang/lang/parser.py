"""Parse seqlang text into the syntax tree of :mod:`seqlang.lang.syntax`.

The grammar lives in ``grammar/seqlang.lark`` and ships inside the package.
Lark's exceptions are translated here into :class:`SeqlangError`; callers
never see lark types. Parsing stops at the first syntax error.

>>> parse_text("let t = 2 ns", "x.seq").items[0].name.name
't'
"""
from __future__ import annotations

import functools
import re
from importlib import resources

from lark import Lark, Token, Transformer, v_args
from lark.exceptions import UnexpectedCharacters, UnexpectedEOF, UnexpectedInput, UnexpectedToken

from . import syntax as ast
from .diagnostics import SOURCES, SeqlangError, Span, error


@functools.lru_cache(maxsize=1)
def _lark() -> Lark:
    text = resources.files("seqlang").joinpath("grammar/seqlang.lark").read_text("utf-8")
    # cache=True keeps the built LALR tables in the temp directory, keyed by the grammar
    # and lark version: start-up then skips rebuilding them.
    return Lark(text, parser="lalr", propagate_positions=True, maybe_placeholders=True, cache=True)


def parse_text(text: str, path: str) -> ast.SourceFile:
    """Parse one file's text; raise :class:`SeqlangError` on a syntax error."""
    SOURCES.add(path, text)
    try:
        tree = _lark().parse(text)
    except UnexpectedInput as exc:
        raise SeqlangError([_syntax_error(exc, text, path)]) from None
    items = _Builder(path).transform(tree)
    return ast.SourceFile(path, text, tuple(items.children))


def parse_file(path: str) -> ast.SourceFile:
    """Read and parse a file; a missing file is an error without a span."""
    with open(path, encoding="utf-8") as handle:
        return parse_text(handle.read(), path)


# ---- syntax errors in words -----------------------------------------------
_WORDS = {
    "NAME": "a name", "NUMBER": "a number", "UNIT": "a unit", "STRING": 'a quoted file name',
    "LBRACE": "`{`", "RBRACE": "`}`", "LPAR": "`(`", "RPAR": "`)`", "COMMA": "`,`",
    "EQUAL": "`=`", "LEVEL": "a Rydberg level such as 58S1/2", "CHANNEL": "an output such as awg1.2",
    "KET": "a ket such as |01>", "$END": "the end of the file", "MINUS": "`-`", "PLUS": "`+`",
    "STAR": "`*`", "SLASH": "`/`", "CIRCUMFLEX": "`^`", "PORT": "`port`",
}


def _terminal_word(name: str) -> str:
    """How to show an expected terminal; lark's anonymous ones (`..`, `->`) by their text."""
    if name in _WORDS:
        return _WORDS[name]
    if name.startswith("__ANON"):
        pattern = {t.name: t.pattern for t in _lark().terminals}.get(name)
        if pattern is not None:
            return "`" + re.sub(r"\\(.)", r"\1", pattern.value) + "`"
    return f"`{name.lower()}`" if name.isupper() else name


def _describe_expected(expected: set[str]) -> str:
    # A missing `}` is the commonest slip: name it first so that it is never cut off.
    words = sorted({_terminal_word(t) for t in expected}, key=lambda w: (w != "`}`", w))
    if len(words) > 6:
        words = words[:6] + ["..."]
    return ", ".join(words)


def _syntax_error(exc: UnexpectedInput, text: str, path: str):
    line, column = exc.line if exc.line > 0 else 1, exc.column if exc.column > 0 else 1
    if isinstance(exc, UnexpectedCharacters):
        char = text[exc.pos_in_stream] if exc.pos_in_stream < len(text) else "?"
        span = Span(path, line, column, line, column + 1, exc.pos_in_stream, exc.pos_in_stream + 1)
        return error(f"unexpected character `{char}`", span, _char_hint(char))
    if isinstance(exc, UnexpectedEOF) or (isinstance(exc, UnexpectedToken) and exc.token.type == "$END"):
        last = text.rstrip().splitlines() or [""]
        # The caret goes just after the last character: that is where something is missing.
        span = Span(path, len(last), len(last[-1]) + 1, len(last), len(last[-1]) + 2)
        expected = getattr(exc, "accepts", None) or getattr(exc, "expected", None) or set()
        hint = "a closing `}` is probably missing" if "RBRACE" in expected else None
        return error(f"unexpected end of file; expected {_describe_expected(set(expected))}", span, hint)
    token = exc.token
    span = _token_span(token, path)
    expected = set(exc.accepts or exc.expected)
    return error(f"unexpected {_token_words(token)}; expected {_describe_expected(expected)}",
                 span, _token_hint(token, expected))


def _token_words(token: Token) -> str:
    if token.type in ("NAME", "NUMBER", "UNIT", "STRING", "LEVEL", "CHANNEL", "KET"):
        # "a number `7`" reads wrongly after "unexpected": drop the article.
        noun = _WORDS[token.type].split(" such")[0].removeprefix("a ").removeprefix("an ")
        return f"{noun} `{token}`"
    return f"`{token}`"


def _char_hint(char: str) -> str | None:
    if char == "'":
        return 'file names are written in double quotes, e.g. "lab.rig"'
    if char in ";":
        return "statements need no separator; put the next one after a space or on a new line"
    return None


def _token_hint(token: Token, expected: set[str]) -> str | None:
    if token.type == "NUMBER" and "NAME" in expected:
        return "a name must start with a letter or `_`"
    if token.type == "UNIT" and "NAME" in expected:
        return f"`{token}` is a unit and cannot be used as a name here"
    if "RBRACE" in expected and token.type in ("RIG", "SEQUENCE", "BLOCK", "SITE", "USE"):
        return "a closing `}` is probably missing before this"
    return None


def _token_span(token: Token, path: str) -> Span:
    end_line = token.end_line or token.line
    end_column = token.end_column or token.column + len(token)
    return Span(path, token.line, token.column, end_line, end_column,
                token.start_pos or 0, token.end_pos or 0)


# ---- the Transformer: builds nodes, checks nothing --------------------------
class _Builder(Transformer):
    """Turns lark's tree into :mod:`syntax` nodes, attaching spans."""

    def __init__(self, path: str):
        super().__init__()
        self.path = path

    def _span(self, meta) -> Span:
        if getattr(meta, "empty", True):
            return Span(self.path, 1, 1, 1, 1)
        return Span(self.path, meta.line, meta.column, meta.end_line, meta.end_column,
                    meta.start_pos, meta.end_pos)

    def _ident(self, token: Token) -> ast.Ident:
        return ast.Ident(str(token), _token_span(token, self.path))

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
        return ast.WithUnit(operand, str(unit), self._span(meta), _token_span(unit, self.path))

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
        return ast.Prop(self._ident(children[0]), children[1], self._span(meta))

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
        return tuple(self._ident(c) for c in children)

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

    @v_args(meta=True)
    def expect_stmt(self, meta, children):
        (state, is_ket) = children[1]
        return ast.ExpectStmt(children[0], state, is_ket, self._span(meta))

    @v_args(meta=True)
    def use_stmt(self, meta, children):
        return ast.UseStmt(str(children[0])[1:-1], self._span(meta))

    @v_args(meta=True)
    def import_stmt(self, meta, children):
        return ast.ImportStmt(str(children[0])[1:-1], self._span(meta))
