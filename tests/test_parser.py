"""The parser: node types, source spans on every node, syntax errors in words."""
from __future__ import annotations

import pytest

from seqlang.lang import syntax as ast
from seqlang.lang.diagnostics import SeqlangError
from seqlang.lang.parser import parse_text

SEQ = """\
use "bench.rig"
site a = na at (0, 5.2) um
group pair = a
sequence s {
  pulse ryd_na rabi 30 MHz area pi/2 shape gaussian(sigma = 20 ns)
  together align end {
    wait 1 us
  }
  repeat 3 { do flip(pair, angle = pi) }
  image na -> shot
}
expect a as |1>
"""


@pytest.fixture(scope="module")
def tree():
    return parse_text(SEQ, "s.seq")


def _sequence(tree) -> ast.SequenceDef:
    return next(i for i in tree.items if isinstance(i, ast.SequenceDef))


def test_top_level_items_in_order(tree):
    kinds = [type(i).__name__ for i in tree.items]
    assert kinds == ["UseStmt", "SiteStmt", "GroupStmt", "SequenceDef", "ExpectStmt"]
    assert tree.items[0].path == "bench.rig"


def test_unit_token_span_points_at_mhz(tree):
    pulse = _sequence(tree).body[0]
    rabi = next(p for p in pulse.props if p.key.name == "rabi").value
    assert isinstance(rabi, ast.WithUnit) and rabi.unit == "MHz"
    # "  pulse ryd_na rabi 30 MHz": 30 starts at column 21, MHz at column 24 (1-based).
    assert (rabi.span.line, rabi.span.column) == (5, 21)
    assert (rabi.unit_span.line, rabi.unit_span.column, rabi.unit_span.end_column) == (5, 24, 27)
    assert SEQ[rabi.unit_span.start:rabi.unit_span.end] == "MHz"


def test_statement_and_name_spans(tree):
    pulse = _sequence(tree).body[0]
    assert (pulse.span.line, pulse.span.column) == (5, 3)
    assert (pulse.drive.name, pulse.drive.span.column, pulse.drive.span.end_column) == ("ryd_na", 9, 15)
    site = tree.items[1]
    assert (site.name.span.line, site.name.span.column) == (2, 6)


def test_expression_shapes(tree):
    pulse = _sequence(tree).body[0]
    area = next(p for p in pulse.props if p.key.name == "area").value
    assert isinstance(area, ast.BinOp) and area.op == "/"
    assert isinstance(area.left, ast.UnitRef) and area.left.unit == "pi"
    shape = next(p for p in pulse.props if p.key.name == "shape").value
    assert isinstance(shape, ast.Call) and shape.func.name == "gaussian"
    assert shape.args[0].name.name == "sigma"
    position = tree.items[1].position
    assert isinstance(position, ast.WithUnit) and isinstance(position.operand, ast.TupleExpr)


def test_statements_of_the_body(tree):
    body = _sequence(tree).body
    assert [type(s).__name__ for s in body] == ["PulseStmt", "TogetherStmt", "RepeatStmt", "ImageStmt"]
    assert body[1].align.name == "end"
    do = body[2].body[0]
    assert do.block.name == "flip" and [a.name.name if a.name else None for a in do.args] == [None, "angle"]
    assert (body[3].species.name, body[3].record.name) == ("na", "shot")


def test_ket_and_levels_and_channels():
    tree = parse_text('rig r {\n  species na = Na23 { rydberg 58S1/2 }\n'
                      '  drive d microwave na { port awg1.2 }\n}\nexpect a, b as |01>\n', "r.rig")
    rig = tree.items[0]
    level = rig.species[0].props[0].value
    assert isinstance(level, ast.LevelExpr) and level.text == "58S1/2"
    assert isinstance(rig.drives[0].props[0].value, ast.ChannelExpr)
    expect = tree.items[1]
    assert expect.is_ket and expect.state.name == "|01>"


def test_comments_are_ignored():
    tree = parse_text("# a comment\nlet t = 2 ns  # trailing\n", "c.seq")
    assert len(tree.items) == 1 and tree.items[0].span.line == 2


def _syntax_error(text: str):
    with pytest.raises(SeqlangError) as info:
        parse_text(text, "bad.seq")
    return info.value.diagnostics


def test_parser_stops_at_the_first_syntax_error():
    diags = _syntax_error("site 1 = na at (0, 0) um\nsite 2 = na at (1, 0) um\n")
    assert len(diags) == 1
    assert (diags[0].span.line, diags[0].span.column) == (1, 6)
    assert diags[0].message == "unexpected number `1`; expected a name"


def test_missing_brace_is_reported_at_the_brace_never_closed():
    diags = _syntax_error("sequence s {\n  together {\n    wait 1 us\n  }\n  wait 2 us\n")
    assert diags[0].message == "this `{` is never closed: the file ends before its `}`"
    assert diags[0].hint == "add `}` where the block opened on line 1 should end"
    assert (diags[0].span.line, diags[0].span.column, diags[0].span.end_column) == (1, 12, 13)


def test_missing_brace_before_a_top_level_keyword():
    diags = _syntax_error("sequence s {\n  wait 1 us\n\nexpect a as |0>\n")
    assert diags[0].message == "this `{` is never closed: `expect` on line 4 comes before its `}`"
    assert (diags[0].span.line, diags[0].span.column) == (1, 12)


def test_no_lark_internal_names_in_messages():
    diags = _syntax_error("sequence s {\n  pulse mw area pi\n")
    assert "__" not in diags[0].message and "anon" not in diags[0].message.lower()


def test_single_quotes_get_a_hint():
    diags = _syntax_error("use 'bench.rig'\n")
    assert diags[0].message == "unexpected character `'`"
    assert "double quotes" in diags[0].hint


# ---- the rendered form: message, source line, caret, hint (golden files) -------------
RENDERED = ["missing_brace", "many_errors", "bad_rig_many", "unknown_site"]


@pytest.mark.parametrize("name", RENDERED)
def test_rendered_diagnostics_match_golden(name, monkeypatch, capsys):
    from conftest import TESTS, check_golden
    from seqlang import cli
    monkeypatch.chdir(TESTS / "bad")
    assert cli.main(["check", f"{name}.seq"]) == 1
    err = capsys.readouterr().err
    assert "Traceback" not in err
    check_golden(f"errors/{name}.txt", err)


def test_a_new_rule_needs_only_a_builder_method(monkeypatch):
    """The recipe of DEVELOPERS.md ("How to add a statement"): a grammar rule plus a method."""
    from dataclasses import dataclass
    from importlib import resources

    from lark import Lark, v_args

    from seqlang.lang import parser

    grammar = resources.files("seqlang").joinpath("grammar/seqlang.lark").read_text("utf-8")
    grammar = grammar.replace("_stmt: pulse_stmt", "_stmt: hold_stmt\n     | pulse_stmt")
    grammar += '\nhold_stmt: "hold" NAME [expr]\n'
    extended = Lark(grammar, parser="lalr", maybe_placeholders=True)

    @dataclass(frozen=True)
    class Hold:
        name: ast.Ident
        time: object
        span: object

    class Builder(parser._Builder):
        @v_args(meta=True)
        def hold_stmt(self, meta, children):
            return Hold(self._ident(children[0]), children[1], self._span(meta))

    monkeypatch.setattr(parser, "_lark", lambda: extended)
    monkeypatch.setattr(parser, "_Builder", Builder)
    tree = parse_text("sequence s {\n  wait 1 us\n  hold coil 2 ms\n  hold coil\n}\n", "h.seq")
    hold, bare = tree.items[0].body[1:]
    assert isinstance(hold, Hold) and hold.name.name == "coil" and hold.time.unit == "ms"
    assert (hold.span.line, hold.span.column, hold.span.end_column) == (3, 3, 17)
    assert bare.time is None
    with pytest.raises(SeqlangError) as info:
        parse_text("sequence s {\n  = 1\n}\n", "h.seq")
    assert "a statement (hold, pulse, wait" in info.value.diagnostics[0].message


def _our_spans(node, out, skip=()):
    """Spans of every node built from a rule's extent (names and units carry token spans)."""
    from dataclasses import fields, is_dataclass
    if isinstance(node, (tuple, list)):
        for item in node:
            _our_spans(item, out, skip)
    elif is_dataclass(node):
        if not isinstance(node, ast.Ident) and id(node) not in skip:
            s = node.span
            out.append((s.line, s.column, s.end_line, s.end_column, s.start, s.end))
        inner = (id(node.channel),) if isinstance(node, ast.PortDecl) else ()
        for f in fields(node):
            if f.name not in ("span", "unit_span"):
                _our_spans(getattr(node, f.name), out, skip + inner)


PROGRAMS = __import__("pathlib").Path(__file__).parent.parent / "programs"


@pytest.mark.parametrize("name", sorted(p.name for p in PROGRAMS.glob("*.*") if p.suffix in (".seq", ".rig")))
def test_spans_match_lark_position_propagation(name):
    """Independent reference: lark's own tree with propagate_positions gives the same extents."""
    from collections import Counter
    from importlib import resources

    from lark import Lark, Tree
    from lark.visitors import _vargs_meta

    from seqlang.lang import parser

    text = (PROGRAMS / name).read_text(encoding="utf-8")
    grammar = resources.files("seqlang").joinpath("grammar/seqlang.lark").read_text("utf-8")
    reference = Lark(grammar, parser="lalr", propagate_positions=True, maybe_placeholders=True).parse(text)
    with_extent = {n for n in dir(parser._Builder)
                   if getattr(getattr(parser._Builder, n), "visit_wrapper", None) is _vargs_meta}
    with_extent |= {"setting"}
    expected = [(t.meta.line, t.meta.column, t.meta.end_line, t.meta.end_column, t.meta.start_pos, t.meta.end_pos)
                for t in reference.iter_subtrees() if isinstance(t, Tree) and t.data in with_extent]
    ours: list = []
    _our_spans(parse_text(text, name).items, ours)
    assert len(expected) > 10 and Counter(ours) == Counter(expected)


_EDGE_TEXTS = [
    "",
    "# only a comment",
    "\n\n  # comments and blanks at the end\n\t\f\v  \n",
    "let t = 2 ns # a comment with no line end",
    "let t = 2ns\nlet u=t*3+ -1 us\n\n\n# x\nlet w = (1, 2) um",
    'use "a.rig"\r\nsite a = na at (0, 0) um\r\n',
]


@pytest.mark.parametrize("name", sorted(p.name for p in PROGRAMS.glob("*.*") if p.suffix in (".seq", ".rig"))
                         + [f"edge{i}" for i in range(len(_EDGE_TEXTS))])
def test_fast_driver_builds_the_tree_of_larks_own_driver(name):
    """Independent reference: lark's own LALR driver and lexer over the same table and callbacks
    (the fast loop in seqlang/lang/lalr.py re-implements both) give equal trees, spans included."""
    from seqlang.lang import parser, source_text
    text = _EDGE_TEXTS[int(name[4:])] if name.startswith("edge") else (PROGRAMS / name).read_text(encoding="utf-8")
    text = source_text.normalise(text)
    lark = parser._lark()
    driver = parser._LalrDriver(parser._fast_table(lark)[0], parser._callbacks(lark, parser._Builder(name)))
    reference = parser._source_file(name, text, driver.parse(lark.parser._make_lexer_thread(text), "start"))
    assert parse_text(text, name) == reference


class _Node:
    def __init__(self):
        self.other = None


def test_objects_built_with_the_collector_paused_go_to_the_oldest_generation_and_stay_collectable():
    """Python's gc module (get_objects, collect): after the pause the new objects are in the
    oldest generation (so no young pass walks them again), and a cycle made meanwhile is still
    freed by a full collection (nothing is left frozen)."""
    import gc
    import weakref

    from seqlang.lang.parser import cyclic_gc_paused

    if not gc.isenabled():
        pytest.skip("the collector is off in this process")
    with cyclic_gc_paused():
        kept = [_Node() for _ in range(1000)]
        a, b = _Node(), _Node()
        a.other, b.other = b, a
        cycle = weakref.ref(a)
        del a, b
    assert gc.get_freeze_count() == 0
    oldest = {id(o) for o in gc.get_objects(generation=2)}
    assert all(id(node) in oldest for node in kept)
    assert gc.get_count()[0] < 100
    gc.collect()
    assert cycle() is None
