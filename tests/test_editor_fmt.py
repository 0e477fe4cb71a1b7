"""`seqlang fmt`: idempotent, meaning-preserving, comment-keeping, with CI exit codes.

"Means the same program" is checked against the parser's own tree: the trees of
the original and of the formatted text must be equal once source positions are
removed (the comparison below is written here, independent of the formatter).
"""
from __future__ import annotations

import dataclasses
import glob
import os
import random
import subprocess
import sys

import pytest

from seqlang.editor.formatter import find_comments, format_text
from seqlang.lang.diagnostics import SeqlangError, Span
from seqlang.lang.parser import parse_text

ROOT = os.path.join(os.path.dirname(__file__), "..")
PROGRAM_FILES = sorted(glob.glob(os.path.join(ROOT, "programs", "*.*"))
                       + glob.glob(os.path.join(ROOT, "programs", "lib", "*.*")))


def without_spans(node):
    """A syntax tree as nested tuples, with every Span and the source text dropped."""
    if dataclasses.is_dataclass(node):
        values = [without_spans(getattr(node, f.name)) for f in dataclasses.fields(node)
                  if f.name != "text" and not isinstance(getattr(node, f.name), Span)]
        return (type(node).__name__, *values)
    if isinstance(node, (tuple, list)):
        return tuple(without_spans(x) for x in node)
    return node


def comment_texts(text: str) -> list[str]:
    return [c.text for c in find_comments(text)]


def assert_good_format(text: str, path: str) -> str:
    formatted = format_text(text, path)
    assert format_text(formatted, path) == formatted, "formatting twice changes the text"
    assert without_spans(parse_text(formatted, path)) == without_spans(parse_text(text, path))
    assert comment_texts(formatted) == comment_texts(text), "a comment was lost or moved out of order"
    return formatted


@pytest.mark.parametrize("path", PROGRAM_FILES, ids=os.path.basename)
def test_demo_programs_format_well(path):
    with open(path, encoding="utf-8") as handle:
        assert_good_format(handle.read(), path)


# ---- a seeded generator of valid, untidy programs ----------------------------------
class Untidy:
    """Random programs in the language's grammar, with odd spacing and comments everywhere."""

    def __init__(self, seed: int):
        self.rng = random.Random(seed)

    def gap(self) -> str:
        return self.rng.choice([" ", "  ", "\t", " \n  ", "\n\n\n   "])

    def comment(self) -> str:
        return self.rng.choice(["", "", "", "  # note\n", "\n# a whole line\n", "   #x{y}\n"])

    def name(self) -> str:
        return self.rng.choice(["a", "b", "gap", "omega", "t_1", "x2"])

    def expr(self, depth: int = 0) -> str:
        leaves = ["1", "2.5", "3e-3", "pi", "2pi", "omega", "4 us", "1.3 MHz", "90 deg", "0.6 %"]
        if depth > 2 or self.rng.random() < 0.4:
            return self.rng.choice(leaves)
        left, right = self.expr(depth + 1), self.expr(depth + 1)
        return self.rng.choice([f"{left}+{right}", f"({left} - {right})", f"{left}*{right}",
                                f"{left} / ({right})", f"-{left}", f"({left})^2", f"sqrt({left})",
                                f"({left}) us", f"{left}/{right}"])

    def statement(self, depth: int) -> str:
        choices = ["pulse", "wait", "do", "image", "switch", "set", "trigger", "let"]
        if depth < 2:
            choices += ["together", "repeat"]
        kind = self.rng.choice(choices)
        g = self.gap
        if kind == "pulse":
            props = "".join(f"{g()}{k}{g()}{self.expr()}" for k in self.rng.sample(["area", "duration", "phase", "rabi"], 2))
            on = f"{g()}on{g()}a,b" if self.rng.random() < 0.5 else ""
            return f"pulse{g()}mw{on}{props}"
        if kind == "together":
            return f"together{g()}align end{g()}{{{self.body(depth + 1)}}}"
        if kind == "repeat":
            return f"repeat {self.expr()}{g()}{{{self.body(depth + 1)}}}"
        simple = {"wait": f"wait{g()}{self.expr()}", "do": f"do echo(gap={self.expr()},{g()}3)",
                  "image": f"image cs->r{g()}duration 1 ms", "switch": f"switch{g()}sh{g()}off",
                  "set": f"set coil{g()}0.5 A", "trigger": f"trigger cam{g()}width 1 us",
                  "let": f"let {self.name()}={self.expr()}"}
        return simple[kind]

    def body(self, depth: int) -> str:
        return "".join(f"{self.gap()}{self.statement(depth)}{self.comment()}"
                       for _ in range(self.rng.randint(0, 4))) + self.gap()

    def rig(self) -> str:
        g = self.gap
        return (f"rig lab{g()}{{{g()}tick 2 ns{self.comment()}{g()}species na=Na23{g()}{{qubit (F=1,mF=0)<->(F=2, mF=0)"
                f"{g()}rydberg 58S1/2}}{self.comment()}{g()}drive mw microwave na {{ rabi 1 MHz{g()}detuning -2 MHz..2 MHz"
                f" port awg0.1 }}{g()}port coil = dac.3 {{ kind analog{self.comment()} range -2 A .. 2 A }}"
                f"{g()}image na {{}}{g()}let omega = {self.expr()}{g()}}}")

    def program(self) -> str:
        g = self.gap
        parts = ['use "lab.rig"', 'import "lib.seq"', f"site a = na at ({self.expr()}, 0){g()}um",
                 "group pair = a, b", f"let omega ={g()}{self.expr()}",
                 f"block echo(gap = 1 ms, n) {{{self.body(1)}}}", f"sequence s {{{self.body(0)}}}",
                 "expect a, b as |01>", "expect a,b as phi_plus"]
        if self.rng.random() < 0.3:
            parts.insert(0, self.rig())
        return self.comment() + "".join(f"{p}{self.comment()}{self.gap()}" for p in parts)


@pytest.mark.parametrize("seed", range(50))
def test_generated_programs_format_well(seed):
    text = Untidy(seed).program()
    formatted = assert_good_format(text, f"generated{seed}.seq")
    assert not any(line != line.rstrip() for line in formatted.splitlines())


def test_comments_stay_beside_their_statements():
    text = "sequence s {\n  # first\n  wait 1 us   # one\n  wait   2 us\n}\n"
    assert format_text(text, "x.seq") == "sequence s {\n  # first\n  wait 1 us  # one\n  wait 2 us\n}\n"



def test_lattices_indices_and_fills_are_formatted():
    text = ('lattice t   from "traps.csv"\nlattice d = square {  pitch 5 um   size (4,3) }\n'
            "group g = d[ 0..1 , *],d[3,2]\nsequence s {\n  fill   g  from d[*, 0]  strategy straight\n}\n")
    assert format_text(text, "x.seq") == (
        'lattice t from "traps.csv"\nlattice d = square { pitch 5 um  size (4, 3) }\n'
        "group g = d[0 .. 1, *], d[3, 2]\nsequence s {\n  fill g from d[*, 0] strategy straight\n}\n")

def test_operators_keep_their_grouping():
    # (a - b) - c and a - (b - c) are different numbers: the parentheses must survive.
    text = "let x = 1 - (2 - 3)\nlet y = (1 - 2) - 3\nlet z = 2^3^2\nlet w = (2^3)^2\n"
    assert format_text(text, "x.seq") == "let x = 1 - (2 - 3)\nlet y = 1 - 2 - 3\nlet z = 2^3^2\nlet w = (2^3)^2\n"


def test_syntax_error_is_raised_not_formatted():
    with pytest.raises(SeqlangError):
        format_text("sequence s {\n  wait 1 us\n", "x.seq")


# ---- the command line -------------------------------------------------------------
def _fmt(*args, cwd, capsys):
    """Run `seqlang fmt` in this process (the same entry point as the console script)."""
    from seqlang.cli import main
    here = os.getcwd()
    os.chdir(cwd)
    try:
        code = main(["fmt", *args])
    except SystemExit as exc:  # argparse's misuse exit
        code = exc.code
    finally:
        os.chdir(here)
    out, err = capsys.readouterr()
    return code, out, err


def test_check_exit_codes(tmp_path, capsys):
    tidy, untidy, broken = tmp_path / "tidy.seq", tmp_path / "untidy.seq", tmp_path / "broken.seq"
    tidy.write_text("let t = 2 ns\n")
    untidy.write_text("let   t=2 ns\n")
    broken.write_text("let t = \n")
    assert _fmt("--check", "tidy.seq", cwd=tmp_path, capsys=capsys)[0] == 0
    code, out, _ = _fmt("--check", "tidy.seq", "untidy.seq", cwd=tmp_path, capsys=capsys)
    assert code == 1 and "untidy.seq" in out
    assert untidy.read_text() == "let   t=2 ns\n", "--check must not write"
    code, _, err = _fmt("--check", "broken.seq", cwd=tmp_path, capsys=capsys)
    assert code == 1 and "broken.seq:1:" in err and "^" in err
    assert _fmt("--check", "missing.seq", cwd=tmp_path, capsys=capsys)[0] == 2
    assert _fmt(cwd=tmp_path, capsys=capsys)[0] == 2
    assert _fmt("untidy.seq", cwd=tmp_path, capsys=capsys)[0] == 0
    assert untidy.read_text() == "let t = 2 ns\n"


def test_console_command_exit_code(tmp_path):
    """One run through a real process, as CI runs it."""
    (tmp_path / "untidy.seq").write_text("wait_not_a_statement\n")
    result = subprocess.run([sys.executable, "-m", "seqlang", "fmt", "--check", "untidy.seq"],
                            cwd=tmp_path, capture_output=True, text=True, timeout=60)
    assert result.returncode == 1 and "untidy.seq:1:1" in result.stderr


def test_demo_programs_are_kept_formatted(capsys):
    code, out, err = _fmt("--check", *PROGRAM_FILES, cwd=ROOT, capsys=capsys)
    assert code == 0, out + err
