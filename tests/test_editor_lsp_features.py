"""`seqlang lsp` end to end with pytest-lsp's client (a real LSP client library from PyPI):
formatting, quick fixes, context completion, signature help, block-call hover, rig edits
and stale hover.

Messages and positions follow the Language Server Protocol specification (Microsoft,
LSP 3.17, 2022).
"""
from __future__ import annotations

import asyncio
import json
import os
import shutil
import sys
from pathlib import Path

import pytest
import pytest_lsp
from lsprotocol import types as lsp
from pytest_lsp import ClientServerConfig, LanguageClient

from conftest import ROOT, check_golden

pytestmark = pytest.mark.asyncio(loop_scope="module")
PROGRAMS = ROOT / "programs"
WAIT_S = 60  # generous: the machine is shared; nothing here measures speed
WORKDIR = Path(os.environ.get("TMPDIR", "/tmp")) / f"seqlang-lsp-features-{os.getpid()}"


def _workdir() -> Path:
    if not WORKDIR.exists():
        shutil.copytree(PROGRAMS, WORKDIR / "programs")
    return WORKDIR / "programs"


@pytest_lsp.fixture(scope="module", config=ClientServerConfig(
    server_command=[sys.executable, "-m", "seqlang", "lsp"],
    server_env={**os.environ, "PYTHONPATH": str(ROOT)}))
async def client(lsp_client: LanguageClient):
    await lsp_client.initialize_session(lsp.InitializeParams(
        capabilities=lsp.ClientCapabilities(), root_uri=_workdir().as_uri()))
    yield
    await lsp_client.shutdown_session()
    shutil.rmtree(WORKDIR, ignore_errors=True)


# ---- helpers ------------------------------------------------------------------------------
async def open_doc(client: LanguageClient, name: str, text: str) -> str:
    """Open `text` as the document `name` next to the demo rig; wait for its diagnostics."""
    uri = (_workdir() / name).as_uri()
    client.diagnostics.pop(uri, None)
    client.text_document_did_open(lsp.DidOpenTextDocumentParams(lsp.TextDocumentItem(uri, "seqlang", 1, text)))
    await diagnostics(client, uri)
    return uri


async def change_doc(client: LanguageClient, uri: str, text: str, version: int) -> list[lsp.Diagnostic]:
    client.diagnostics.pop(uri, None)
    client.text_document_did_change(lsp.DidChangeTextDocumentParams(
        lsp.VersionedTextDocumentIdentifier(version, uri), [lsp.TextDocumentContentChangeWholeDocument(text)]))
    return await diagnostics(client, uri)


async def diagnostics(client: LanguageClient, uri: str, until=lambda d: True) -> list[lsp.Diagnostic]:
    """The next diagnostics published for `uri` that satisfy `until`."""
    async def wait():
        while uri not in client.diagnostics or not until(client.diagnostics[uri]):
            await asyncio.sleep(0.05)
        return client.diagnostics[uri]
    return await asyncio.wait_for(wait(), WAIT_S)


def position(text: str, needle: str, extra: int = 0) -> lsp.Position:
    offset = text.index(needle) + extra
    return lsp.Position(text.count("\n", 0, offset), offset - (text.rfind("\n", 0, offset) + 1))


def apply_edits(text: str, edits: list[lsp.TextEdit]) -> str:
    """Apply LSP text edits (the client's job) to a text."""
    starts = [0]
    for line in text.splitlines(keepends=True):
        starts.append(starts[-1] + len(line))

    def offset(p: lsp.Position) -> int:
        return min(starts[min(p.line, len(starts) - 1)] + p.character, len(text))
    for edit in sorted(edits, key=lambda e: (e.range.start.line, e.range.start.character), reverse=True):
        text = text[:offset(edit.range.start)] + edit.new_text + text[offset(edit.range.end):]
    return text


def seqlang_fmt(tmp_path: Path, name: str, text: str) -> str:
    """What `seqlang fmt FILE` makes of the text (the command line's own entry point)."""
    from seqlang.cli import main
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    assert main(["fmt", str(path)]) == 0
    return path.read_text(encoding="utf-8")


MESSY = """# messy layout
use   "millpond.rig"
site c0=cs at (0,0) um
let t_ramsey=250 us     # the free evolution
sequence messy {
pulse mw_cs   area pi/2
    wait t_ramsey
  pulse mw_cs area pi/2   phase 90 deg
}
"""


# ---- formatting ------------------------------------------------------------------------------
async def test_formatting_equals_seqlang_fmt(client, tmp_path):
    uri = await open_doc(client, "messy.seq", MESSY)
    edits = await client.text_document_formatting_async(lsp.DocumentFormattingParams(
        lsp.TextDocumentIdentifier(uri), lsp.FormattingOptions(2, True)))
    assert edits, "the messy file must need formatting"
    assert apply_edits(MESSY, edits) == seqlang_fmt(tmp_path, "messy.seq", MESSY)


async def test_formatting_a_tidy_file_changes_nothing(client):
    text = (PROGRAMS / "rabi_ramsey.seq").read_text()
    uri = await open_doc(client, "tidy.seq", text)
    edits = await client.text_document_formatting_async(lsp.DocumentFormattingParams(
        lsp.TextDocumentIdentifier(uri), lsp.FormattingOptions(2, True)))
    assert not edits


async def test_range_formatting_changes_only_that_range(client, tmp_path):
    uri = await open_doc(client, "messy_range.seq", MESSY)
    lines = MESSY.splitlines(keepends=True)
    wanted = lsp.Range(lsp.Position(5, 0), lsp.Position(7, 0))  # `pulse mw_cs   area pi/2` and the wait
    edits = await client.text_document_range_formatting_async(lsp.DocumentRangeFormattingParams(
        lsp.TextDocumentIdentifier(uri), wanted, lsp.FormattingOptions(2, True)))
    result = apply_edits(MESSY, edits).splitlines(keepends=True)
    assert result[:5] == lines[:5] and result[7:] == lines[7:]  # outside the range: untouched
    assert result[5:7] == ["  pulse mw_cs area pi/2\n", "  wait t_ramsey\n"]
    # The rest of the file formats as `seqlang fmt` would have done it.
    assert seqlang_fmt(tmp_path, "a.seq", "".join(result)) == seqlang_fmt(tmp_path, "b.seq", MESSY)


async def test_formatting_refuses_a_file_with_a_syntax_error(client):
    text = 'use "millpond.rig"\nsite c0 = cs at (0, 0) um;\n'
    uri = await open_doc(client, "unformattable.seq", text)
    with pytest.raises(Exception) as refused:
        await client.text_document_formatting_async(lsp.DocumentFormattingParams(
            lsp.TextDocumentIdentifier(uri), lsp.FormattingOptions(2, True)))
    assert "not formatted" in str(refused.value) and "unexpected character" in str(refused.value)


# ---- quick fixes ---------------------------------------------------------------------------------
async def _fix_and_recheck(client, name: str, text: str, title: str) -> tuple[str, list]:
    uri = await open_doc(client, name, text)
    (diagnostic,) = client.diagnostics[uri]
    actions = await client.text_document_code_action_async(lsp.CodeActionParams(
        lsp.TextDocumentIdentifier(uri), diagnostic.range, lsp.CodeActionContext([diagnostic])))
    chosen = [a for a in actions if a.title == title]
    assert chosen, [a.title for a in actions]
    fixed = apply_edits(text, chosen[0].edit.changes[uri])
    return fixed, await change_doc(client, uri, fixed, 2)


async def test_quick_fix_did_you_mean(client):
    text = (PROGRAMS / "rabi_ramsey.seq").read_text().replace("pulse mw_cs area pi/2\n", "pulse mw_cx area pi/2\n")
    fixed, after = await _fix_and_recheck(client, "typo.seq", text, "Replace with `mw_cs`")
    assert fixed == (PROGRAMS / "rabi_ramsey.seq").read_text()
    assert list(after) == []


async def test_quick_fix_adds_the_one_unit_kind_that_fits(client):
    text = (PROGRAMS / "rabi_ramsey.seq").read_text().replace("wait 100 us", "wait 100")
    fixed, after = await _fix_and_recheck(client, "unitless.seq", text, "Add the unit `ns`")
    assert "wait 100 ns" in fixed and list(after) == []


async def test_quick_fix_adds_a_use_line(client):
    text = (PROGRAMS / "rabi_ramsey.seq").read_text().replace('use "millpond.rig"\n', "")
    fixed, after = await _fix_and_recheck(client, "norig.seq", text, 'Add `use "millpond.rig"`')
    assert fixed.splitlines()[1] == 'use "millpond.rig"'  # after the comment at the top
    assert list(after) == []


# ---- completion: five cursor positions against a golden list --------------------------------------
CURSORS = {
    # After `pulse` on a line that targets the caesium site: the caesium drives only.
    "after_pulse_with_cs_target": ("hold_and_image.seq", "pulse mw_cs area pi\n",
                                   "pulse  on c area pi\n", "pulse  on c", 6),
    # After `on` for a caesium drive: the caesium sites and groups.
    "after_on": ("hold_and_image.seq", "pulse mw_cs area pi\n", "pulse ryd_cs on \n", "ryd_cs on ", 10),
    # In a pulse's property list: the pulse properties with their units.
    "pulse_properties": ("hold_and_image.seq", "pulse mw_cs area pi\n", "pulse mw_cs area pi \n",
                         "mw_cs area pi ", 14),
    # After `do`: the imported blocks, with their parameters as snippets.
    "after_do": ("hold_and_image.seq", "do echo_train(count = 4, gap = 1.3 ms)", "do ", "    do ", 7),
    # In a rig's drive block: the properties of that drive kind.
    "rydberg_drive_block": ("millpond.rig", "    reach all\n", "    \n    reach all\n",
                            "    \n    reach all", 4),
}


@pytest.mark.parametrize("name", sorted(CURSORS))
async def test_completion_at_five_positions_matches_golden(client, name):
    filename, old, new, needle, extra = CURSORS[name]
    base = (PROGRAMS / filename).read_text()
    assert old in base
    text = base.replace(old, new, 1)
    uri = await open_doc(client, f"completion_{name}{os.path.splitext(filename)[1]}", base)
    await change_doc(client, uri, text, 2)
    at = position(text, needle, extra)
    result = await client.text_document_completion_async(lsp.CompletionParams(lsp.TextDocumentIdentifier(uri), at))
    shown = [{"label": i.label, "detail": i.detail,
              **({"insert": i.insert_text} if i.insert_text else {})} for i in result.items]
    check_golden(f"editor/completion_{name}.json", json.dumps(shown, indent=1, ensure_ascii=False) + "\n")


# ---- signature help and block-call hover -----------------------------------------------------------
async def test_signature_help_for_a_block_call(client):
    text = (PROGRAMS / "hold_and_image.seq").read_text()
    uri = await open_doc(client, "signature.seq", text)
    result = await client.text_document_signature_help_async(lsp.SignatureHelpParams(
        lsp.TextDocumentIdentifier(uri), position(text, "gap = 1.3 ms")))
    (signature,) = result.signatures
    assert signature.label == "echo_train(count = 4, gap = 1 ms)"  # as declared in lib/decoupling.seq
    assert result.active_parameter == 1
    start, end = signature.parameters[1].label
    assert signature.label[start:end] == "gap = 1 ms"


async def test_hover_on_a_block_call_shows_its_expansion_duration(client):
    text = (PROGRAMS / "hold_and_image.seq").read_text()
    uri = await open_doc(client, "blockhover.seq", text)
    shown = (await client.text_document_hover_async(lsp.HoverParams(
        lsp.TextDocumentIdentifier(uri), position(text, "echo_train", 3)))).contents.value
    # Each echo is gap + pi pulse + gap; the pi pulse at mw_na's 22 kHz maximum lasts
    # 1 / (2 * 22 kHz) = 22.7273 us (Rabi formula). Four echoes with gap 1.3 ms:
    # 4 * (2.6 ms + 22.7273 us) = 10.4909 ms.
    assert "echo_train(count = 4, gap = 1 ms)" in shown
    assert "expansion lasts 10.4909 ms" in shown


# ---- rig edits and stale hover ----------------------------------------------------------------------
async def test_editing_the_rig_rechecks_the_open_sequences_that_use_it(client):
    rig_text = (_workdir() / "millpond.rig").read_text()
    seq_text = (PROGRAMS / "bell_pair.seq").read_text()
    rig_uri = await open_doc(client, "millpond.rig", rig_text)
    seq_uri = await open_doc(client, "bell_follow.seq", seq_text)
    assert list(client.diagnostics[seq_uri]) == []
    client.diagnostics.pop(seq_uri, None)
    await change_doc(client, rig_uri, rig_text.replace("drive mw_na ", "drive mw_sodium "), 2)
    broken = await diagnostics(client, seq_uri)
    assert broken and all("unknown drive `mw_na`" in d.message for d in broken)
    client.diagnostics.pop(seq_uri, None)
    await change_doc(client, rig_uri, rig_text, 3)
    assert list(await diagnostics(client, seq_uri)) == []


async def test_hover_keeps_the_last_good_analysis_and_says_it_is_stale(client):
    text = (PROGRAMS / "rabi_ramsey.seq").read_text()
    uri = await open_doc(client, "stale.seq", text)
    broken = text.replace("  image cs -> clock\n", "  image cs -> clock\n  wait 3 MHz\n")
    assert await change_doc(client, uri, broken, 2)  # an error elsewhere in the file
    shown = (await client.text_document_hover_async(lsp.HoverParams(
        lsp.TextDocumentIdentifier(uri), position(broken, "pulse mw_cs area pi/2")))).contents.value
    # A pi/2 pulse at the drive's 18 kHz maximum lasts 1 / (4 * 18 kHz) = 13.89 us (Rabi formula).
    assert "13.88" in shown or "13.89" in shown
    assert "last version of this file that checked" in shown
