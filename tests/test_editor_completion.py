"""Completion contexts, signature help, quick fixes and the wire guard, without a server
(the end-to-end checks over stdio are in test_editor_lsp*.py)."""
from __future__ import annotations

import io

import pytest

from conftest import ROOT
from seqlang.editor import actions
from seqlang.editor.analysis import analyse
from seqlang.editor.completion import Names, completion_items, grammar_words, key_detail, rig_block_keys, \
    statement_keys
from seqlang.editor.format_edits import apply, range_edits
from seqlang.editor.signatures import call_at
from seqlang.editor.transport import MAX_MESSAGE_BYTES, GuardedReader, bad_position
from seqlang.lang.diagnostics import SeqlangError
from seqlang.program import rig as rig_module

PROGRAMS = ROOT / "programs"


def labels_at(path, text: str, needle: str, extra: int = 0) -> list[str]:
    analysis = analyse(str(path), text, {})
    offset = text.index(needle) + extra
    names = Names(tuple(analysis.symbols), {f.path: f.text for f in analysis.files}, str(path), offset)
    return [item.label for item in completion_items(text, offset, names)]


@pytest.fixture(scope="module")
def sequence():
    path = PROGRAMS / "hold_and_image.seq"
    return path, path.read_text()


def test_statement_words_come_from_the_grammar():
    grammar = (ROOT / "seqlang" / "grammar" / "seqlang.lark").read_text()
    words = grammar_words()
    # Every statement rule of the grammar starts with its word; none is left out.
    for word in ("pulse", "wait", "together", "repeat", "do", "image", "switch", "set", "trigger", "let"):
        assert word in words["statement"] and f'"{word}"' in grammar
    assert "port" in words["rig"] and "sequence" in words["top"]


def test_at_the_start_of_a_statement_the_statement_words(sequence):
    path, text = sequence
    assert labels_at(path, text, "  switch shutter_cs", 2) == list(grammar_words()["statement"])


def test_after_switch_the_ports_then_on_and_off(sequence):
    path, text = sequence
    assert "shutter_cs" in labels_at(path, text, "switch shutter_cs", 7)
    assert labels_at(path, text, "switch shutter_cs on", 18) == ["on", "off"]


def test_after_a_number_in_a_wait_the_duration_units(sequence):
    path, text = sequence
    changed = text.replace("switch shutter_cs on", "wait 3 ")
    assert labels_at(path, changed, "wait 3 ", 7) == ["s", "ms", "us", "ns", "ps"]


def test_block_parameters_are_offered_only_inside_their_block():
    path = PROGRAMS / "lib" / "decoupling.seq"
    text = path.read_text()
    inside = labels_at(path, text, "pulse mw_na area pi phase drive_phase", 26)
    assert "drive_phase" in inside and "count" not in inside


def test_rig_level_and_isotopes():
    path = PROGRAMS / "millpond.rig"
    text = path.read_text()
    assert labels_at(path, text, "  tick", 2)[:5] == list(grammar_words()["rig"])
    isotopes = labels_at(path, text, "species na = Na23", 13)
    assert "Na23" in isotopes and "Cs133" in isotopes


def test_every_schema_key_gets_a_detail():
    # Data-driven: whatever keys the resolver declares, completion can describe them.
    schemas = [statement_keys(w) for w in grammar_words()["statement"]]
    schemas += [rig_block_keys(w, "rydberg") for w in ("species", "drive", "image", "port", "rig")]
    keys = [key for schema in schemas for key in schema.values()]
    assert len(keys) > 40
    assert all(isinstance(key_detail(key), str) and key_detail(key) for key in keys)
    assert key_detail(rig_module.PORT_KEYS["kind"]) == "one of: digital, analog"
    assert key_detail(rig_module.RIG_SETTINGS["counter_bits"]).startswith("whole number")


def test_signature_call_positions():
    assert call_at("  do echo(", 10) == ("echo", 0)
    assert call_at("  do echo(1 ms, sqrt(2), ", 25) == ("echo", 2)
    assert call_at("  do echo(gap = 2", 17) == ("echo", "gap")
    assert call_at("  let x = sqrt(", 15) is None


def test_quick_fix_titles_from_the_checkers_own_messages(tmp_path):
    rig = (PROGRAMS / "millpond.rig").read_text()
    (tmp_path / "millpond.rig").write_text(rig)
    text = (PROGRAMS / "rabi_ramsey.seq").read_text().replace("wait 100 us", "wait 100")
    path = str(tmp_path / "x.seq")
    (diagnostic,) = analyse(path, text, {}).diagnostics
    from lsprotocol import types as lsp
    where = lsp.Range(lsp.Position(0, 0), lsp.Position(0, 1))
    fixes = actions.fixes_for(diagnostic, where, path, text)
    assert [f.title for f in fixes][:2] == ["Add the unit `ns`", "Add the unit `s`"]
    assert [f.preferred for f in fixes].count(True) == 1


def test_range_formatting_refuses_when_leaving_changes_out_would_change_meaning():
    text = "let a = 1\nsite d = na at (0,0) um\n"
    edits = range_edits(text, "x.seq", 1, 1)
    assert apply(text, edits) == "let a = 1\nsite d = na at (0, 0) um\n"
    with pytest.raises(SeqlangError):
        range_edits("let a = 1\nsite d = na at (0, 0) um;\n", "x.seq", 0, 0)


@pytest.mark.parametrize("params, bad", [
    ({"position": {"line": 0, "character": 0}}, False),
    ({"position": {"line": -1, "character": 0}}, True),
    ({"position": {"line": 0, "character": 2.0}}, True),
    ({"position": {"line": True, "character": 0}}, True),
    ({"range": {"start": {"line": 0, "character": 0}, "end": {"line": 0, "character": -2}}}, True),
])
def test_bad_positions_are_found(params, bad):
    assert bool(bad_position(params)) is bad


def test_the_reader_skips_an_oversized_message_and_finds_the_next():
    refused = []
    body = b'{"jsonrpc": "2.0", "method": "x"}'
    stream = io.BufferedReader(io.BytesIO(
        b"Content-Length: %d\r\n\r\n{lie}" % (MAX_MESSAGE_BYTES + 1) + b"Content-Length: %d\r\n\r\n" % len(body) + body))
    reader = GuardedReader(stream, on_refused=refused.append)
    assert reader._readline() == b"Content-Length: %d\r\n" % len(body)
    assert reader._readline() == b"\r\n"
    assert reader._readexactly(len(body)) == body
    assert refused == [MAX_MESSAGE_BYTES + 1]


# ---- no position and no half-typed text makes completion fail -------------------------------------
from hypothesis import HealthCheck, given, settings, strategies as st  # noqa: E402

from seqlang.editor.positions import map_offset  # noqa: E402

_DEMO = (PROGRAMS / "hold_and_image.seq").read_text()
_DEMO_ANALYSIS = analyse(str(PROGRAMS / "hold_and_image.seq"), _DEMO, {})


def _line_and_column(text: str, offset: int) -> tuple[str, int]:
    start = text.rfind("\n", 0, offset) + 1
    end = text.find("\n", offset)
    return text[start:end if end >= 0 else len(text)], offset - start


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(cut=st.integers(0, len(_DEMO)), length=st.integers(0, 40),
       insert=st.text(alphabet=" \n{}(),=#\"-.abcdo_nup0123456789µ", max_size=12), where=st.integers(0, 10_000))
def test_completion_and_cursor_mapping_never_fail_on_edited_text(cut, length, insert, where):
    text = _DEMO[:cut] + insert + _DEMO[cut + length:]
    offset = where % (len(text) + 1)
    names = Names(tuple(_DEMO_ANALYSIS.symbols), {}, str(PROGRAMS / "hold_and_image.seq"), offset)
    items = completion_items(text, offset, names)
    assert all(item.label for item in items)
    mapped = map_offset(text, _DEMO, offset)
    if mapped is not None:  # the cursor's line is unchanged, and so is its column
        assert _line_and_column(_DEMO, mapped) == _line_and_column(text, offset)
    call_at(text, offset)


def test_positions_count_the_clients_code_units():
    # LSP 3.17: UTF-16 by default; an astral character (outside the BMP) takes two units.
    from lsprotocol import types as lsp
    from seqlang.editor.positions import offset_of, position_of, span_range
    from seqlang.lang.diagnostics import Span
    text = "let a = 1  # 😀 note\nlet µ_b = 2 us\n"
    after_emoji = text.index(" note")
    assert position_of(text, after_emoji, "utf-16") == lsp.Position(0, after_emoji + 1)
    assert position_of(text, after_emoji, "utf-32") == lsp.Position(0, after_emoji)
    assert position_of(text, after_emoji, "utf-8") == lsp.Position(0, after_emoji + 3)
    for encoding in ("utf-8", "utf-16", "utf-32"):
        assert offset_of(text, position_of(text, after_emoji, encoding), encoding) == after_emoji
    # A span on the emoji's line, after it (1-based code-point columns in seqlang's spans).
    column = after_emoji + 2
    shown = span_range(Span("x.seq", 1, column, 1, column + 4), text, "utf-16")
    assert (shown.start.character, shown.end.character) == (column, column + 4)
    assert offset_of(text, lsp.Position(1, 999)) == len(text) - 1  # past the end of the line: its end


def test_a_job_out_of_memory_is_reported_as_the_memory_budget():
    # The worker turns MemoryError (what RLIMIT_AS gives) into its own status, and the
    # server words it as a warning naming the budget and how to raise it.
    from seqlang.editor import worker
    from seqlang.editor.server import budget_diagnostic

    def hungry():
        raise MemoryError
    assert worker._run_job(hungry, ()) == (worker.MEMORY, None)
    budget = worker.Budget(seconds=3, memory_mb=600)
    shown = budget_diagnostic("x.seq", worker.Outcome(worker.MEMORY), budget)
    assert shown.message == "not checked: checking needed more than the editor's budget of 600 MiB"
    assert "SEQLANG_LSP_MEMORY_MB" in shown.hint and not shown.is_error


@pytest.mark.slow
def test_the_worker_stops_a_check_at_its_memory_budget_and_serves_on(tmp_path):
    # 10^6 pulses need far more than 100 MiB above the worker's start; RLIMIT_AS stops them.
    from seqlang.editor.worker import MEMORY, OK, Budget, Worker
    (tmp_path / "millpond.rig").write_text((PROGRAMS / "millpond.rig").read_text())
    text = ('use "millpond.rig"\nsite d = na at (0, 0) um\n'
            "sequence many {\n  repeat 1000000 { pulse mw_na area pi }\n}\n")
    worker = Worker(Budget(seconds=120, memory_mb=260))
    try:
        assert worker.run("analyse", str(tmp_path / "many.seq"), text, {}).status == MEMORY
        assert worker.run("format", "let  a=1\n", "x.seq").status == OK  # a fresh child
    finally:
        worker.close()
