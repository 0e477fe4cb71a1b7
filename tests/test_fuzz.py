"""No input makes seqlang raise, hang or print a message without file:line:col and a caret.

Three parts (machinery in tests/fuzzing.py; the ≥ 50,000-case run is
benchmarks/fuzz_long.py, figures in benchmarks/RESULTS.md):

* a seeded mutation corpus built from every .seq and .rig in the repository, run
  through the same entry point as ``seqlang check``, each case under a time bound;
* well-formed programs generated with hypothesis (seeded, derandomized), which must
  end in ``ok`` or in diagnostics, and when ``ok`` compile to strictly valid JSON and
  CSV holding finite numbers only;
* a few dozen mutants through the real command line (a subprocess per case).
"""
from __future__ import annotations

import collections
import json
import math
import os
import random
import subprocess
import sys

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import fuzzing
from seqlang import cli

SEED = 20261203
MUTANTS = 2000
CLI_MUTANTS = 24
TIME_BOUND_S = 10.0  # CPU seconds per case; normal cases take ~10 ms
GOOD = ("ok", "diagnosed")
# Importing the atomic-data library and the first diagonalisation of each pair of the
# corpus (seconds each, cached) are paid outside the per-case time bound: the cache starts
# from what earlier tests computed, and every corpus program is checked once.


@pytest.fixture(scope="module", autouse=True)
def private_atomic_data_cache(tmp_path_factory):
    """Mutated Rydberg levels must not fill the user's atomic-data cache."""
    import shutil
    from seqlang.atoms import cache
    private = tmp_path_factory.mktemp("atomic-cache")
    if cache.cache_dir().is_dir():  # what earlier tests computed for the corpus' own levels
        for stored in cache.cache_dir().glob("*.json"):
            shutil.copyfile(stored, private / stored.name)
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv(cache.CACHE_DIR_ENV, str(private))
        yield


@pytest.fixture(scope="module")
def tree(tmp_path_factory):
    copies = fuzzing.scratch_tree(tmp_path_factory.mktemp("corpus"))
    fuzzing.prewarm(copies)
    return copies


def _report(outcomes: list[tuple[fuzzing.Case, fuzzing.Outcome]]) -> str:
    failures = [(c, o) for c, o in outcomes if o.kind not in GOOD]
    lines = [f"{o.kind} {o.detail} <- {c.origin}: {c.text[:300]!r}" for c, o in failures[:10]]
    return "\n".join(lines)


def test_corpus_holds_every_program_of_the_repository():
    files = fuzzing.corpus_files()
    assert len([f for f in files if f.suffix == ".seq"]) >= 40 and any(f.suffix == ".rig" for f in files)
    assert any(f.name == "bell_pair.seq" for f in files)


def test_mutation_corpus_never_crashes_or_hangs(tree):
    rng = random.Random(SEED)
    outcomes = []
    for number in range(MUTANTS):
        case = fuzzing.make_case(rng, tree, number)
        outcomes.append((case, fuzzing.run_case(case, TIME_BOUND_S)))
    counts = collections.Counter(o.kind for _, o in outcomes)
    print("mutation outcomes:", dict(sorted(counts.items())))
    assert counts["diagnosed"] > MUTANTS // 2, "most mutants are wrong and must be diagnosed"
    assert counts["ok"] > 0, "some mutants are still valid programs"
    bad = sum(n for kind, n in counts.items() if kind not in GOOD)
    assert bad == 0, _report(outcomes)


def test_real_command_line_on_mutants(tree):
    """Exit code 0 or 1, no traceback, and the same message shape, from `python -m seqlang check`."""
    rng = random.Random(SEED + 1)
    for number in range(CLI_MUTANTS):
        case = fuzzing.make_case(rng, tree, number)
        run = subprocess.run([sys.executable, "-m", "seqlang", "check", str(case.path)],
                             capture_output=True, text=True, timeout=60,
                             env={**os.environ, "SEQLANG_TRACEBACK": "1"})
        outcome = fuzzing.classify(case.text, run.returncode, run.stdout, run.stderr, None)
        assert "Traceback" not in run.stderr, run.stderr[-2000:]
        assert outcome.kind in GOOD, (outcome, case.text[:500], run.stderr[-1000:])


def test_message_shape_checker_can_fail(tmp_path):
    path = tmp_path / "x.seq"
    path.write_text("use \"lab.rig\"\n\n\n", encoding="utf-8")
    assert fuzzing.message_shape_problem(f"{path}:1:2: error: no caret\n1 error") != ""
    assert fuzzing.message_shape_problem("Traceback (most recent call last):\n") != ""
    assert fuzzing.message_shape_problem(f"{path}:1:2: error: no count line") != ""
    good = f"{path}:1:5: error: unknown drive `q`\n  pulse q area pi\n        ^\n  hint: h\n1 error"
    assert fuzzing.message_shape_problem(good) == ""


# ---- well-formed programs from hypothesis ----------------------------------------
RIG = fuzzing.ROOT / "tests" / "bad" / "lab.rig"  # tick 4 ns; drives, ports and imaging below

_magnitudes = st.one_of(
    st.floats(min_value=0, max_value=1e12, allow_nan=False),
    st.sampled_from([0.0, 1e-300, 1e-9, 0.5, 1.0, 3.0, 1e6, 1e20, 1e300, 1.7976931348623157e308]),
)


def _literal(x: float) -> str:
    text = repr(float(x)).replace("e+", "e")
    return text if "e" in text or "." in text else text + ".0"


@st.composite
def _expr(draw, depth: int = 0) -> str:
    base = _literal(draw(_magnitudes))
    if depth > 2:
        return base
    form = draw(st.integers(0, 6))
    if form == 0:
        return base
    other = draw(_expr(depth + 1))
    if form <= 4:
        return f"({base} {'+-*/^'[form - 1]} {other})" if form < 4 else f"({other} / {base})"
    if form == 5:
        return f"{draw(st.sampled_from(['sqrt', 'exp', 'log', 'sin', 'abs']))}({other})"
    return f"(-{other})"


def _value(draw, units: list[str]) -> str:
    return f"{draw(_expr())} {draw(st.sampled_from(units))}"


@st.composite
def _pulse(draw) -> str:
    drive, target = draw(st.sampled_from([("mw_rb", ""), ("ryd_rb", " on a"), ("mw_k", ""), ("ryd_k", "")]))
    parts = []
    keys = draw(st.lists(st.sampled_from(["area", "duration", "rabi", "detuning", "phase", "shape"]),
                         min_size=1, max_size=4, unique=True))
    for key in keys:
        if key == "area":
            parts.append(f"area {draw(_expr())} {draw(st.sampled_from(['rad', 'pi', 'deg', '']))}")
        elif key in ("duration",):
            parts.append(f"duration {_value(draw, ['ns', 'us', 'ms', 's', 'ps'])}")
        elif key in ("rabi", "detuning"):
            parts.append(f"{key} {_value(draw, ['Hz', 'kHz', 'MHz'])}")
        elif key == "phase":
            parts.append(f"phase {_value(draw, ['rad', 'deg'])}")
        else:
            parts.append("shape " + draw(st.sampled_from(
                ["square", "gaussian", "blackman", "ramped", f"gaussian(sigma = {_value(draw, ['ns', 'us'])})",
                 f"ramped(ramp = {_value(draw, ['ns', 'us'])})"])))
    return f"pulse {drive}{target} " + "  ".join(parts)


@st.composite
def _statement(draw, depth: int = 0) -> str:
    kind = draw(st.integers(0, 8 if depth < 2 else 5))
    if kind <= 1:
        return draw(_pulse())
    if kind == 2:
        return f"wait {_value(draw, ['ps', 'ns', 'us', 'ms', 's'])}"
    if kind == 3:
        return f"set coil {_value(draw, ['A', 'mA'])}"
    if kind == 4:
        return draw(st.sampled_from(["switch shutter on", "switch shutter off", "trigger shutter",
                                     "image k -> seen"]))
    if kind == 5:
        return f"let c{draw(st.integers(0, 3))} = {draw(_expr())}"
    body = "\n".join(draw(st.lists(_statement(depth + 1), min_size=0, max_size=3)))
    if kind == 6:
        return f"repeat {draw(st.sampled_from(['1', '2', '7', '1e3', '0.5', '1e7']))} {{\n{body}\n}}"
    return f"together {draw(st.sampled_from(['', 'align end', 'align center']))} {{\n{body}\n}}"


@st.composite
def programs(draw) -> str:
    body = "\n".join(draw(st.lists(_statement(), min_size=1, max_size=6)))
    return f'use "lab.rig"\nsite a = rb at (0, 0) um\nsite b = k at (9, 0) um\nsequence s {{\n{body}\n}}\n'


def _strict_json(text: str) -> dict:
    def refuse(constant: str):
        raise ValueError(f"non-finite number {constant} in timing.json")
    return json.loads(text, parse_constant=refuse)


@pytest.fixture(scope="module")
def generated_dir(tmp_path_factory):
    folder = tmp_path_factory.mktemp("generated")
    (folder / "lab.rig").write_text(RIG.read_text(encoding="utf-8"), encoding="utf-8")
    return folder


@settings(max_examples=150, deadline=None, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(text=programs())
def test_well_formed_programs_compile_to_finite_tables_or_are_diagnosed(generated_dir, text):
    from seqlang.api import load
    from seqlang.emit.tables import timing_csv, timing_json
    path = generated_dir / "gen.seq"
    path.write_text(text, encoding="utf-8")
    outcome = fuzzing.run_case(fuzzing.Case(path, text, "hypothesis"), TIME_BOUND_S)
    assert outcome.kind in GOOD, (outcome, text)
    if outcome.kind != "ok":
        return
    checked = load(str(path)).checked
    document = _strict_json(timing_json(checked))
    assert document["report"]["max_area_error_rad"] >= 0
    for row in timing_csv(checked).splitlines()[3:]:
        for field in row.split(","):
            assert field.lower() not in ("nan", "inf", "-inf"), row
    for event in checked.quantized.events:
        assert all(math.isfinite(v) for v in (event.start_s, event.duration_s, event.rabi_hz,
                                               event.detuning_hz, event.phase_rad, event.value))
