"""The front end's robustness: line ends, byte-order mark, nesting limits, long names, no cached pickles."""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import given, settings, strategies as st

from seqlang.lang.diagnostics import SOURCES, SeqlangError, render
from seqlang.lang.parser import MAX_NESTING, parse_text
from seqlang.lang.source_text import split_lines

BAD = Path(__file__).parent / "bad"
ROOT = Path(__file__).parent.parent
LINES = ['use "lab.rig"', "site a = rb at (0, 0) um", "# a comment", "sequence s {",
         "  pulse mw_rb area pi", "  wait 3 us", "}"]


def _shape(tree):
    return [(type(i).__name__, i.span.line, i.span.column) for i in tree.items]


@pytest.mark.parametrize("ending", ["\r\n", "\r"])
def test_crlf_and_lone_cr_end_lines_like_lf(ending):
    lf = parse_text("\n".join(LINES) + "\n", "lf.seq")
    other = parse_text(ending.join(LINES) + ending, "other.seq")
    assert _shape(other) == _shape(lf)
    assert len(other.items[-1].body) == 2, "the comment must not swallow the rest of a CR-only file"


def test_lone_cr_program_checks_with_all_its_events(tmp_path):
    (tmp_path / "lab.rig").write_text((BAD / "lab.rig").read_text())
    (tmp_path / "cr.seq").write_bytes("\r".join(LINES).encode())
    from seqlang.compile.pipeline import check
    assert len(check(str(tmp_path / "cr.seq")).timeline.events) == 1


def test_byte_order_mark_is_accepted_and_columns_unchanged():
    with_bom = parse_text("\ufeff" + "\n".join(LINES), "bom.seq")
    assert _shape(with_bom) == _shape(parse_text("\n".join(LINES), "plain.seq"))
    assert with_bom.items[0].span.column == 1


def test_form_feed_and_vertical_tab_are_blanks_not_line_ends():
    tree = parse_text("let a = 1 ns\x0c\x0blet b = 2 ns\n", "ff.seq")
    assert [i.span.line for i in tree.items] == [1, 1]


# Line ends and characters that str.splitlines() would split on but seqlang does not.
_PIECES = st.sampled_from(["let a = 1 ns", "# note \x0c\x85\u2028\x1c x", "  ", "\t", "\x0b", "let b = a"])
_ENDS = st.sampled_from(["\n", "\r\n", "\r"])


@settings(max_examples=60, deadline=None)
@given(lines=st.lists(st.tuples(_PIECES, _ENDS), min_size=1, max_size=8), bad_line=st.integers(0, 7))
def test_printer_quotes_the_line_the_lexer_counted(lines, bad_line):
    """An error on line N is printed with line N of the text under it, whatever the line ends."""
    bad_line = min(bad_line, len(lines) - 1)
    text = "".join(("@" + piece if i == bad_line else piece) + end for i, (piece, end) in enumerate(lines))
    with pytest.raises(SeqlangError) as info:
        parse_text(text, "prop.seq")
    diag = info.value.diagnostics[0]
    assert diag.span.line == bad_line + 1
    shown = render(diag).splitlines()[1]
    assert shown.strip().startswith("@")


def test_split_lines_matches_lexer_count():
    text = "a\x0cb\x85c\u2028d\ne\n"
    assert split_lines(text) == ["a\x0cb\x85c\u2028d", "e"]


def _nested_togethers(depth: int) -> str:
    return ("sequence s {\n" + "together {\n" * depth + "pulse mw_rb area pi\n" + "}\n" * depth + "}\n")


def test_nesting_up_to_the_limit_runs_through_every_pass(tmp_path):
    """MAX_NESTING levels parse, resolve, lower and quantize without exhausting recursion."""
    (tmp_path / "lab.rig").write_text((BAD / "lab.rig").read_text())
    body = _nested_togethers(MAX_NESTING - 1)
    (tmp_path / "deep.seq").write_text('use "lab.rig"\nsite a = rb at (0, 0) um\n' + body)
    from seqlang.compile.pipeline import check
    assert len(check(str(tmp_path / "deep.seq")).timeline.events) == 1


def test_one_level_more_is_a_diagnostic():
    with pytest.raises(SeqlangError) as info:
        parse_text(_nested_togethers(MAX_NESTING), "deep.seq")
    assert "nests more than 100 levels deep" in info.value.diagnostics[0].message


@pytest.mark.parametrize("text", ["let x = " + "-" * 5000 + "1", "let x = " + " + ".join(["1"] * 5000),
                                  "let x = " + "(" * 5000 + "1" + ")" * 5000,
                                  _nested_togethers(3000)])
def test_very_deep_text_never_raises_recursion_error(text):
    try:
        parse_text(text, "deep.seq")
    except SeqlangError as exc:
        assert "nests more than" in exc.diagnostics[0].message


def test_a_megabyte_name_is_not_echoed_whole():
    name = "q" * 1_000_000
    result = subprocess.run([sys.executable, "-m", "seqlang", "check", "huge_unknown_name.seq"],
                            cwd=BAD, capture_output=True, text=True, timeout=120)
    assert result.returncode == 1
    assert len(result.stderr) < 2000 and "100,000 characters" in result.stderr
    with pytest.raises(SeqlangError) as info:
        parse_text(f"let {name} = 1 +", "huge.seq")
    assert len(render(info.value.diagnostics[0])) < 1000


_PLANT = r"""
import os, pickle, sys, tempfile
from lark import Lark
marker = sys.argv[1]
class Payload:
    def __reduce__(self):
        return (open, (marker, "w"))
text = open(sys.argv[2], encoding="utf-8").read()
# Where the old parser (lark's cache=True with these options) kept its pickle:
before = set(os.listdir(tempfile.gettempdir()))
Lark(text, parser="lalr", propagate_positions=True, maybe_placeholders=True, cache=True)
planted = set(os.listdir(tempfile.gettempdir())) - before
assert planted, "lark wrote no cache file"
for name in planted:
    with open(os.path.join(tempfile.gettempdir(), name), "rb") as handle:
        head = handle.readline()
    with open(os.path.join(tempfile.gettempdir(), name), "wb") as handle:
        handle.write(head)
        pickle.dump(Payload(), handle)
        pickle.dump(Payload(), handle)
print(len(planted))
"""


def test_planted_grammar_cache_is_never_loaded(tmp_path):
    """A pickle planted where lark's cache lived in the shared temporary directory is never read."""
    env = dict(os.environ, TMPDIR=str(tmp_path), PYTHONPATH=str(ROOT), SEQLANG_CACHE_DIR=str(tmp_path / "c"))
    marker = tmp_path / "payload-ran"
    planted = subprocess.run([sys.executable, "-c", _PLANT, str(marker), str(ROOT / "grammar" / "seqlang.lark")],
                             env=env, capture_output=True, text=True, timeout=120)
    assert planted.returncode == 0, planted.stderr
    run = subprocess.run([sys.executable, "-c", "import pickle\n"
                          "def refuse(*a, **k): raise AssertionError('unpickling')\n"
                          "pickle.load = pickle.loads = refuse\n"
                          "from seqlang.lang.parser import parse_text\n"
                          "print(len(parse_text('let t = 2 ns', 'x.seq').items))"],
                         env=env, capture_output=True, text=True, timeout=120)
    assert run.returncode == 0 and run.stdout.strip() == "1", run.stderr
    assert not marker.exists()


def test_command_line_lists_match_the_simulator():
    """seqlang/sim/commands.py writes these lists out to keep start-up free of numpy: keep them equal."""
    from seqlang.sim import api, commands, noise
    assert commands.ENGINES == api.ENGINES
    assert commands.SOURCES == noise.SOURCES


def test_checking_imports_neither_numpy_nor_scipy():
    """`seqlang check` of square pulses and `seqlang --help` start without the numerical libraries."""
    code = ("import sys\nfrom seqlang import cli\n"
            "assert cli.main(['check', 'programs/bell_pair.seq']) == 0\n"
            "heavy = sorted(m for m in ('numpy', 'scipy', 'qutip', 'arc', 'matplotlib') if m in sys.modules)\n"
            "print('heavy:' + ','.join(heavy))")
    run = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=120,
                         env=dict(os.environ, PYTHONPATH=str(ROOT)))
    assert run.returncode == 0, run.stderr
    assert run.stdout.strip().splitlines()[-1] == "heavy:"


def _fresh_cache(tmp_path, monkeypatch):
    from seqlang.lang import grammar_cache, parser
    monkeypatch.setenv("SEQLANG_CACHE_DIR", str(tmp_path / "cache"))
    text = (ROOT / "grammar" / "seqlang.lark").read_text(encoding="utf-8")
    build = lambda: parser.Lark(text, parser="lalr", maybe_placeholders=True)  # noqa: E731
    first = grammar_cache.cached_lark(text, build)
    files = list((tmp_path / "cache" / "parser").glob("grammar-*.json"))
    assert len(files) == 1
    return grammar_cache, text, build, first, files[0]


def test_grammar_cache_is_private_json_and_loads_the_same_tables(tmp_path, monkeypatch):
    grammar_cache, text, build, first, path = _fresh_cache(tmp_path, monkeypatch)
    assert os.stat(path.parent).st_mode & 0o777 == 0o700
    assert os.stat(path).st_mode & 0o077 == 0
    assert path.read_bytes().startswith(b"{")  # JSON, not a pickle
    loaded = grammar_cache._load(path)
    assert loaded is not None
    assert loaded.parser.parser._parse_table.states == first.parser.parser._parse_table.states


def test_grammar_cache_file_writable_by_others_or_linked_is_not_read(tmp_path, monkeypatch):
    grammar_cache, text, build, first, path = _fresh_cache(tmp_path, monkeypatch)
    os.chmod(path, 0o666)
    assert grammar_cache._load(path) is None
    os.chmod(path, 0o600)
    link = path.with_name("grammar-link.json")
    link.symlink_to(path)
    assert grammar_cache._load(link) is None
    path.write_text('{"data": "damaged"}')
    assert grammar_cache._load(path) is None
    rebuilt = grammar_cache.cached_lark(text, build)  # a damaged file only costs a rebuild
    assert rebuilt is not first and rebuilt.parse("let t = 2 ns") == first.parse("let t = 2 ns")


def test_grammar_cache_directory_of_another_owner_is_not_used(tmp_path, monkeypatch):
    grammar_cache, text, build, first, path = _fresh_cache(tmp_path, monkeypatch)
    if os.getuid() != 0:
        os.chmod(path.parent, 0o777)  # cannot give it away without root: loosen it instead
    else:
        os.chown(path.parent, 65534, -1)
    assert grammar_cache._private_directory() is None
    calls = []
    grammar_cache.cached_lark(text, lambda: calls.append(1) or build())
    assert calls == [1]
