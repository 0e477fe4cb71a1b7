"""Line traces (seqlang/lang/line_traces.py) change the parse's speed and nothing else.

Independent reference: lark's own LALR driver and lexer (lark, PyPI) over the same table and
reduce callbacks build the tree step by step; the fast parser with its traces must build an
equal tree (spans included) or fail where lark's driver fails."""
from __future__ import annotations

import pytest
from hypothesis import HealthCheck, given, settings, strategies as st
from lark.exceptions import UnexpectedInput

from seqlang.lang import line_traces, parser, source_text
from seqlang.lang.diagnostics import SeqlangError
from seqlang.lang.parser import parse_text


def _reference(text: str, path: str):
    """The tree of lark's own driver, or None where it finds a syntax error."""
    text = source_text.normalise(text)
    lark = parser._lark()
    driver = parser._LalrDriver(parser._fast_table(lark)[0], parser._callbacks(lark, parser._Builder(path)))
    try:
        return parser._source_file(path, text, driver.parse(lark.parser._make_lexer_thread(text), "start"))
    except UnexpectedInput:
        return None


@pytest.fixture
def eager(monkeypatch):
    """A shape is traced at its second sighting, so that short texts have traces."""
    monkeypatch.setattr(line_traces, "TRACE_AFTER", 2)


@pytest.fixture
def replays(monkeypatch):
    """Counts the lines parsed by a trace (each trace run takes one line)."""
    taken = []
    generate = line_traces._generate

    def counting(*args):
        run = generate(*args)

        def counted(*run_args):
            following = run(*run_args)
            if following is not None:
                taken.append(following)
            return following
        return counted

    monkeypatch.setattr(line_traces, "_generate", counting)
    return taken


def _program(lines: list[str]) -> str:
    return 'use "millpond.rig"\nsequence s {\n' + "\n".join(lines) + "\n}\n"


def test_repeated_lines_are_traced_and_build_the_same_tree(replays):
    lines = [f"  pulse mw_na area {1 + i % 7}pi/8 phase {i * 13 % 360} deg" for i in range(60)]
    text = _program(lines)
    assert parse_text(text, "t.seq") == _reference(text, "t.seq")
    # every line after those that taught the trace, but the last (the next token is `}`)
    assert len(replays) == 60 - 2 - 16


def test_a_few_repeated_lines_build_no_trace(monkeypatch):
    """A hand-written file's shapes are not worth a trace (each costs a millisecond to build)."""
    built = []
    build = line_traces.build
    monkeypatch.setattr(line_traces, "build", lambda *args: built.append(1) or build(*args))
    text = _program([f"  pulse mw_na area {i}pi" for i in range(1, line_traces.TRACE_AFTER)])
    assert parse_text(text, "t.seq") == _reference(text, "t.seq")
    assert not built


@pytest.mark.parametrize("odd_line", [
    "  pulse mw_na\n      area 3pi/8 phase 45 deg",       # the same tokens over two lines
    "  pulse mw_na area 3pi/8 phase 45 deg  # a comment",  # a comment after them
    "  pulse mw_na area 3pi/8 phase 45 deg wait 2 us",     # more tokens on the line
    "  pulse mw_na area 3pi/8 phase 45 deg\fwait 2 us",
    "  pulse mw_na area 3 pi/8 phase 45 deg",              # a blank inside the value
    "  pulse mw_na area 3pi/8 phase 45 ns",                # another unit
    "  pulse mw_na area 3pi/8 phase x deg",                # a name for a number
    "  pulse mw_na area 3pi/8 phase 4.5e1 deg",
    "  pulse mw_na area 3pi/8 phase (45) deg",
    "  pulse wait area 3pi/8 phase 45 deg",    # a keyword's spelling where it lexes as a name
])
def test_a_line_unlike_the_traced_ones_builds_the_same_tree(odd_line, replays, eager):
    lines = [f"  pulse mw_na area {1 + i % 7}pi/8 phase {i} deg" for i in range(6)]
    text = _program(lines + [odd_line] + lines)
    assert parse_text(text, "t.seq") == _reference(text, "t.seq")
    assert replays


@pytest.mark.parametrize("odd_line", [
    "  pulse mw_na on 3pi/8 phase 45 deg",    # a keyword where the traced line has a name
    "  pulse mw_na area 3pi/8 phase 45 on",
    "  pulse mw_na area 3pi/8 phase 45 deg }",
])
def test_a_syntax_error_after_traced_lines_is_reported_as_without_traces(odd_line, replays, eager):
    lines = [f"  pulse mw_na area {1 + i % 7}pi/8 phase {i} deg" for i in range(6)]
    text = _program(lines + [odd_line] + lines)
    assert _reference(text, "t.seq") is None
    with pytest.raises(SeqlangError) as traced:
        parse_text(text, "t.seq")
    assert replays
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(line_traces.Traces, "replay", lambda *args: None)  # no line is traced
        with pytest.raises(SeqlangError) as untraced:
            parse_text(text, "t.seq")
    assert traced.value.diagnostics == untraced.value.diagnostics


_NAMES = ["mw_na", "mw_cs", "a", "b", "x1", "pi", "on", "wait", "area", "phase", "deg", "us", "repeat"]
_NUMBERS = ["0", "1", "2.5", "3e2", "45", "7"]
_UNITS = ["", "us", "deg", "pi", "MHz", " ns"]


@st.composite
def _value(draw):
    number, unit = draw(st.sampled_from(_NUMBERS)), draw(st.sampled_from(_UNITS))
    shape = draw(st.sampled_from(["{n}{u}", "{n}{u}/{m}", "({n} + {m}){u}", "-{n}{u}", "{name}"]))
    return shape.format(n=number, u=unit, m=draw(st.sampled_from(_NUMBERS)), name=draw(st.sampled_from(_NAMES)))


@st.composite
def _line(draw):
    kind = draw(st.sampled_from(["pulse", "pulse_on", "wait", "let", "repeat", "broken"]))
    name = draw(st.sampled_from(_NAMES))
    props = " ".join(f"{draw(st.sampled_from(['area', 'phase', 'detuning', 'rabi']))} {draw(_value())}"
                     for _ in range(draw(st.integers(0, 3))))
    if kind == "pulse":
        return f"pulse {name} {props}"
    if kind == "pulse_on":
        return f"pulse {name} on {draw(st.sampled_from(_NAMES))}, b {props}"
    if kind == "wait":
        return f"wait {draw(_value())}"
    if kind == "let":
        return f"let {name} = {draw(_value())}"
    if kind == "repeat":
        return f"repeat {draw(st.sampled_from(_NUMBERS))} {{ wait 1 us }}"
    return draw(st.sampled_from(["pulse", "wait us us", "let = 3", "pulse a area", "pulse a on", "}"]))


@st.composite
def _program_text(draw):
    shapes = draw(st.lists(_line(), min_size=1, max_size=4))
    order = draw(st.lists(st.integers(0, len(shapes) - 1), min_size=3, max_size=40))
    separators = st.sampled_from(["\n  ", "\n  ", "\n  ", "\n", "\n\n    ", "  # c\n  ", " ", "\n\t"])
    body = "".join(shapes[i] + draw(separators) for i in order)
    return _program(["  " + body])


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=_program_text())
def test_fuzzed_programs_of_repeated_lines_parse_as_with_larks_driver(text, eager):
    reference = _reference(text, "f.seq")
    if reference is None:
        with pytest.raises(SeqlangError):
            parse_text(text, "f.seq")
    else:
        assert parse_text(text, "f.seq") == reference


def test_traces_built_per_parse_are_bounded(monkeypatch, eager):
    """Many line shapes, each seen twice or more: no more traces than the bound (each costs
    about a millisecond to build), and the tree is still lark's."""
    built = []
    build = line_traces.build
    monkeypatch.setattr(line_traces, "MAX_TRACES", 3)
    monkeypatch.setattr(line_traces, "build", lambda *args: built.append(1) or build(*args))
    lines = [f"  pulse mw_na {' '.join(['area 1'] * (1 + k))}" for k in range(8) for _ in range(4)]
    text = _program(lines)
    assert parse_text(text, "t.seq") == _reference(text, "t.seq")
    assert len(built) == 3


_PROGRAMS = __import__("pathlib").Path(__file__).parent.parent / "programs"


@pytest.mark.parametrize("name", sorted(p.name for p in _PROGRAMS.glob("*.*") if p.suffix in (".seq", ".rig")))
def test_every_demo_file_written_three_times_over_parses_as_with_larks_driver(name, eager, replays):
    """Every construct of the demo programs, traced (each file three times over, so that its
    lines repeat; names given twice are an error of resolution, not of syntax)."""
    text = source_text.normalise((_PROGRAMS / name).read_text(encoding="utf-8"))
    text = "\n".join([text] * 3)
    assert parse_text(text, name) == _reference(text, name)
    assert replays
