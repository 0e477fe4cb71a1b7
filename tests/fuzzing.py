"""Fuzzing machinery shared by tests/test_fuzz.py (CI size) and benchmarks/fuzz_long.py (long run).

Inputs come from two places:

* a seeded **mutation corpus**: every ``.seq`` and ``.rig`` file of the repository,
  copied into a scratch tree (so that ``use`` and ``import`` still resolve), mutated
  one to three times (deletions, duplications, inserted tokens, extreme numbers,
  arithmetic that leaves the reals, odd characters, deep nesting, long names);
* well-formed programs generated with hypothesis (see tests/test_fuzz.py).

Each case runs through the same entry point as ``seqlang check`` (``seqlang.cli.main``)
under a per-case time bound, and its outcome is classified:

``ok``           exit 0 and ``...: ok (...)`` on stdout
``diagnosed``    exit 1, every message ``file:line:col: severity: ...`` with the source and a caret
``bad-shape``    exit 1 but a message without that shape
``crash``        an uncaught Python exception (where: the innermost seqlang frame)
``hang``         the time bound (CPU seconds) passed
``exit-N``       any other exit code

"""
from __future__ import annotations

import contextlib
import io
import random
import re
import shutil
import signal
import sys
import traceback
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
CORPUS_DIRS = ("programs", "tests/bad", "tests/golden/inputs", "benchmarks/programs")

HEADER = re.compile(r"^(?P<file>.+?):(?P<line>\d+):(?P<col>\d+): (?P<sev>error|warning|note): (?P<msg>.+)$")
COUNT_LINE = re.compile(r"^\d+ errors?$")
INTERNAL_ERROR = 70  # the command line's exit code for a bug in seqlang

# Characters where str.splitlines() and the parser's line counting may disagree.
ODD_LINE_BREAKS = "\r\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029"

# Input classes once fixed in the front end; kept so that a failure on one of
# them can be labelled, never excused (the tests fail on ``known:`` outcomes too).
KNOWN_PARSER_CLASSES: dict = {}

EXTREME_NUMBERS = (
    "1e309", "1e308", "-1e308", "1e-320", "0", "-0", "0.0", "1e20", "999999999", "4294967296",
    "9" * 1000, "0." + "0" * 400 + "1", "1e-9", "3.000000000000001", "nan", "inf", "1e6",
)
HOSTILE_EXPRESSIONS = (
    "(1e309-1e309)", "(1e308*10)", "((-8)^0.5)", "(0 ^ -1)", "exp(1000)", "log(0)", "sqrt(-1)",
    "(1/0)", "(2^1e6)", "(1e-300/1e300)", "tan(pi/2)", "(10^308*10)", "(1e200*1e200)", "abs(-1e308)",
    "(1 s ^ 40)", "(2 MHz ^ 0.5)", "exp(-1000)", "(-1)^(1/3)", "1e400 ns", "(1 / 1e-320)",
)
TOKENS = (
    "{", "}", "(", ")", ",", "..", "->", "=", "+", "-", "*", "/", "^", "pulse", "wait", "repeat",
    "together", "block", "do", "let", "site", "group", "image", "switch", "set", "trigger", "on",
    "area", "duration", "rabi", "detuning", "phase", "shape", "gaussian", "ramped(ramp = 0 ns)",
    "gaussian(sigma = 1 ps)", "blackman", "square", "pi", "MHz", "ns", "s", "us", "um", "deg", "%",
    "align", "end", "center", "expect", "as", "phi_plus", "|01>", "use", "import", '"lab.rig"',
    '"nope.rig"', '"/dev/null"', "rig", "species", "drive", "rydberg", "microwave", "raman",
    "tick", "counter_bits", "reach", "each", "all", "port", "awg0.1", "ttl.4", "58S1/2", "70S1/2",
    "1000S1/2", "F=1", "mF=0", "<->", "#", "\n", "\t", "forever", "é", "µs", "\u00a0",
)


@dataclass(frozen=True)
class Outcome:
    """What one case did."""

    kind: str  # ok, diagnosed, bad-shape, crash, hang, exit-N, or known:<class>
    detail: str = ""  # where a crash happened, or what was wrong with a message


class _Hang(BaseException):
    """Raised by the time bound; a BaseException so that no `except Exception` in seqlang swallows it."""


def corpus_files() -> list[Path]:
    files: list[Path] = []
    for folder in CORPUS_DIRS:
        files += sorted(p for p in (ROOT / folder).rglob("*")
                        if p.suffix in (".seq", ".rig") and not p.is_symlink())
    return files


def scratch_tree(target: Path) -> list[Path]:
    """Copy the corpus under `target` (keeping relative paths); return the copies."""
    copies = []
    for path in corpus_files():
        copy = target / path.relative_to(ROOT)
        copy.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(path, copy)
        copies.append(copy)
    return copies


def prewarm(copies: list[Path]) -> None:
    """Check every program of the corpus once, outside any time bound: importing the
    atomic-data library and the first computation of each declared pair (seconds each,
    then cached) are paid here, so that a case's time bound measures the case."""
    from seqlang import cli
    for copy in copies:
        if copy.suffix == ".seq":
            with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
                try:
                    cli.main(["check", str(copy)])
                except BaseException:  # noqa: BLE001 - a failing corpus file is the cases' business
                    pass


# ---- mutations ------------------------------------------------------------------
def _delete(rng: random.Random, text: str) -> str:
    if not text:
        return text
    i = rng.randrange(len(text))
    return text[:i] + text[i + rng.randint(1, 20):]


def _duplicate(rng: random.Random, text: str) -> str:
    if not text:
        return text
    i = rng.randrange(len(text))
    piece = text[i:i + rng.randint(1, 60)]
    j = rng.randrange(len(text) + 1)
    return text[:j] + piece + text[j:]


def _insert_token(rng: random.Random, text: str) -> str:
    j = rng.randrange(len(text) + 1)
    return text[:j] + " " + rng.choice(TOKENS) + " " + text[j:]


_NUMBER = re.compile(r"(?<![\w.])\d+(\.\d+)?(e[-+]?\d+)?")


def _replace_number(rng: random.Random, text: str) -> str:
    found = list(_NUMBER.finditer(text))
    if not found:
        return _insert_token(rng, text)
    m = rng.choice(found)
    new = rng.choice(EXTREME_NUMBERS + HOSTILE_EXPRESSIONS)
    return text[:m.start()] + new + text[m.end():]


def _swap_lines(rng: random.Random, text: str) -> str:
    lines = text.split("\n")
    if len(lines) < 2:
        return text
    i, j = rng.randrange(len(lines)), rng.randrange(len(lines))
    lines[i], lines[j] = lines[j], lines[i]
    return "\n".join(lines)


def _truncate(rng: random.Random, text: str) -> str:
    return text[:rng.randrange(len(text) + 1)]


def _odd_character(rng: random.Random, text: str) -> str:
    j = rng.randrange(len(text) + 1)
    return text[:j] + rng.choice("\x00\r\ufeff\u2028\x0c\x0b\x85\x7f\ud7ff\U0001f600") + text[j:]


def _nest(rng: random.Random, text: str) -> str:
    depth = rng.choice((2, 10, 40, 300))
    lines = text.split("\n")
    i = rng.randrange(len(lines))
    lines[i] = "together { " * depth + lines[i] + " }" * depth
    return "\n".join(lines)


def _long_name(rng: random.Random, text: str) -> str:
    names = list(re.finditer(r"\b[a-z_][a-z_0-9]*\b", text))
    if not names:
        return text
    m = rng.choice(names)
    return text[:m.start()] + m.group() * rng.choice((3, 200, 20000)) + text[m.end():]


def _repeat_line(rng: random.Random, text: str) -> str:
    lines = text.split("\n")
    i = rng.randrange(len(lines))
    lines[i:i + 1] = [lines[i]] * rng.choice((2, 5, 50))
    return "\n".join(lines)


MUTATORS = (_delete, _duplicate, _insert_token, _replace_number, _replace_number, _replace_number,
            _swap_lines, _truncate, _odd_character, _nest, _long_name, _repeat_line, _insert_token)


def mutate(rng: random.Random, text: str) -> str:
    for _ in range(rng.choice((1, 1, 2, 3))):
        text = rng.choice(MUTATORS)(rng, text)
    return text


# ---- running one case -----------------------------------------------------------
def run_check(path: Path, time_bound_s: float) -> tuple[int | None, str, str, BaseException | None]:
    """`seqlang check path` in this process: (exit code, stdout, stderr, uncaught exception)."""
    from seqlang import cli
    out, err = io.StringIO(), io.StringIO()

    def on_alarm(signum, frame):
        raise _Hang()

    # The command line turns an uncaught exception into exit 70 ("a bug in seqlang");
    # keep the exception itself, so that its place can be named.
    internal: list[BaseException] = []
    report_internal = getattr(cli, "_internal_error", None)

    def keep(exc):
        internal.append(exc)
        return report_internal(exc)

    # The bound is on CPU time (ITIMER_PROF), so a machine busy with other work does not
    # turn a slow case into a "hang".
    previous = signal.signal(signal.SIGPROF, on_alarm)
    signal.setitimer(signal.ITIMER_PROF, time_bound_s)
    if report_internal is not None:
        cli._internal_error = keep
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            code = cli.main(["check", str(path)])
        return code, out.getvalue(), err.getvalue(), (internal[0] if internal else None)
    except BaseException as exc:  # noqa: BLE001 - classifying every escape is the point
        return None, out.getvalue(), err.getvalue(), exc
    finally:
        signal.setitimer(signal.ITIMER_PROF, 0)
        signal.signal(signal.SIGPROF, previous)
        if report_internal is not None:
            cli._internal_error = report_internal


def classify(text: str, code: int | None, stdout: str, stderr: str, exc: BaseException | None) -> Outcome:
    """The outcome of one case (see the module docstring)."""
    if isinstance(exc, _Hang):
        where = _innermost_seqlang_frame(exc)  # where the time bound interrupted it
        return _known_or(text, "hang", f"interrupted at {where}", "seqlang/lang/" in where)
    if exc is not None:
        where = _innermost_seqlang_frame(exc)
        in_parser = "seqlang/lang/" in where or isinstance(exc, RecursionError)
        return _known_or(text, "crash", f"{type(exc).__name__} at {where}: {str(exc)[:120]}", in_parser)
    if code == 0:
        return Outcome("ok") if ": ok (" in stdout else Outcome("bad-shape", "exit 0 without `ok`")
    if code == INTERNAL_ERROR:  # from a subprocess run with SEQLANG_TRACEBACK=1
        frames = re.findall(r'File "[^"]*/(seqlang/[^"]+)", line (\d+)', stderr)
        where = ":".join(frames[-1]) if frames else "outside seqlang"
        in_parser = "seqlang/lang/" in where or "RecursionError" in stderr
        return _known_or(text, "crash", f"exit {code} at {where}", in_parser)
    if code != 1:
        return Outcome(f"exit-{code}", stderr[-300:])
    problem = message_shape_problem(stderr)
    if problem:
        return _known_or(text, "bad-shape", problem, in_parser=True)
    return Outcome("diagnosed")


def _known_or(text: str, kind: str, detail: str, in_parser: bool) -> Outcome:
    if in_parser:
        for name, trigger in KNOWN_PARSER_CLASSES.items():
            if trigger(text):
                return Outcome(f"known:{name}", f"{kind}: {detail}")
    return Outcome(kind, detail)


def _innermost_seqlang_frame(exc: BaseException) -> str:
    frames = [f for f in traceback.extract_tb(exc.__traceback__) if "/seqlang/" in f.filename]
    if not frames:
        return "outside seqlang"
    f = frames[-1]
    return f"seqlang/{f.filename.split('/seqlang/')[-1]}:{f.lineno}"


def message_shape_problem(stderr: str) -> str:
    """'' when every diagnostic is `file:line:col: severity: message` + source + caret."""
    lines = stderr.splitlines()
    if not lines or not COUNT_LINE.match(lines[-1]):
        return "no `N errors` line at the end"
    headers = 0
    for i, line in enumerate(lines[:-1]):
        if line.startswith("  "):
            continue
        m = HEADER.match(line)
        if m is None:
            return f"not a diagnostic line: {line[:100]!r}"
        headers += 1
        if int(m["line"]) < 1 or int(m["col"]) < 1:
            return f"line or column below 1: {line[:100]!r}"
        if len(m["msg"]) > 2000:
            return "a message longer than 2000 characters"
        if not _has_caret(lines, i) and not m["msg"].startswith("cannot read") \
                and not _past_the_end(m["file"], int(m["line"])):
            return f"no source line and caret under: {line[:100]!r}"
    return "" if headers else "exit 1 without a diagnostic"


def _past_the_end(path: str, line: int) -> bool:
    """An empty file, or a position after its last line, has no source line to quote."""
    try:
        return line > len(Path(path).read_text(encoding="utf-8").splitlines())
    except (OSError, UnicodeDecodeError):
        return True


def _has_caret(lines: list[str], i: int) -> bool:
    following = lines[i + 1:i + 3]
    return len(following) == 2 and following[0].startswith("  ") and set(following[1].strip()) == {"^"}


# ---- building cases -------------------------------------------------------------
@dataclass(frozen=True)
class Case:
    """One mutated input: the sequence to check and the text that was mutated."""

    path: Path
    text: str
    origin: str  # the corpus file it came from


_USE = re.compile(r'use\s+"([^"]+)"')


def make_case(rng: random.Random, copies: list[Path], number: int) -> Case:
    """Mutate one corpus file (a sequence, or a rig together with a sequence that uses it)."""
    source = rng.choice(copies)
    original = source.read_text(encoding="utf-8")
    mutated = mutate(rng, original)
    seq = source.with_name(f"_fuzz_{number % 2}.seq")
    if source.suffix == ".seq":
        seq.write_text(mutated, encoding="utf-8", newline="")
        return Case(seq, mutated, source.name)
    user = _a_user_of(source, copies)
    rig = source.with_name(f"_fuzz_{number % 2}.rig")
    rig.write_text(mutated, encoding="utf-8", newline="")
    text = _USE.sub(f'use "{rig.name}"', user.read_text(encoding="utf-8"), count=1) if user else \
        f'use "{rig.name}"\nsequence s {{\n}}\n'
    seq.write_text(text, encoding="utf-8", newline="")
    return Case(seq, mutated, source.name)


def _a_user_of(rig: Path, copies: list[Path]) -> Path | None:
    for path in copies:
        if path.suffix == ".seq" and path.parent == rig.parent and \
                f'"{rig.name}"' in path.read_text(encoding="utf-8"):
            return path
    return None


def run_case(case: Case, time_bound_s: float) -> Outcome:
    return classify(case.text, *run_check(case.path, time_bound_s))
