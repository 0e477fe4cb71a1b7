"""`seqlang lsp` driven by a real client: JSON-RPC over stdio with Content-Length framing.

The framing and the messages follow the Language Server Protocol specification
(Microsoft, LSP 3.17, 2022): positions are 0-based lines and UTF-16 columns.
"""
from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
import threading
import queue

import pytest

PROGRAMS = os.path.join(os.path.dirname(__file__), "..", "programs")
TIMEOUT_S = 30

BROKEN = """use "millpond.rig"

site d = na at (0, 0) um

sequence s {
  pulse mw_na area pi/2
  wait 3 MHz
}
"""
FIXED = BROKEN.replace("wait 3 MHz", "wait 3 us")


class Client:
    """A minimal LSP client: numbered requests, notifications, and a reader thread."""

    def __init__(self, process: subprocess.Popen):
        self.process = process
        self.next_id = 0
        self.inbox: queue.Queue = queue.Queue()
        threading.Thread(target=self._read, daemon=True).start()

    def _read(self) -> None:
        stream = self.process.stdout
        while True:
            headers = {}
            while True:
                line = stream.readline()
                if not line:
                    return
                if line in (b"\r\n", b"\n"):
                    break
                key, _, value = line.decode("ascii").partition(":")
                headers[key.strip().lower()] = value.strip()
            self.inbox.put(json.loads(stream.read(int(headers["content-length"]))))

    def send(self, message: dict) -> None:
        body = json.dumps({"jsonrpc": "2.0", **message}).encode("utf-8")
        self.process.stdin.write(b"Content-Length: %d\r\n\r\n" % len(body) + body)
        self.process.stdin.flush()

    def request(self, method: str, params) -> dict:
        self.next_id += 1
        self.send({"id": self.next_id, "method": method, "params": params})
        reply = self.wait_for(lambda m: m.get("id") == self.next_id and "method" not in m)
        assert "error" not in reply, reply
        return reply["result"]

    def notify(self, method: str, params) -> None:
        self.send({"method": method, "params": params})

    def wait_for(self, matches) -> dict:
        while True:
            message = self.inbox.get(timeout=TIMEOUT_S)
            if matches(message):
                return message

    def diagnostics_for(self, uri: str) -> list:
        message = self.wait_for(lambda m: m.get("method") == "textDocument/publishDiagnostics"
                                and m["params"]["uri"] == uri)
        return message["params"]["diagnostics"]


@pytest.fixture(scope="module")
def workdir(tmp_path_factory):
    """A copy of the demo programs, so the open documents have a rig next to them."""
    target = tmp_path_factory.mktemp("lsp") / "programs"
    shutil.copytree(PROGRAMS, target)
    return target


@pytest.fixture(scope="module")
def client(workdir):
    process = subprocess.Popen([sys.executable, "-m", "seqlang", "lsp"], stdin=subprocess.PIPE,
                               stdout=subprocess.PIPE, stderr=subprocess.DEVNULL)
    try:
        lsp = Client(process)
        lsp.request("initialize", {"processId": os.getpid(), "rootUri": (workdir).as_uri(),
                                   "capabilities": {}})
        lsp.notify("initialized", {})
        yield lsp
        lsp.request("shutdown", None)
        lsp.notify("exit", None)
        assert process.wait(timeout=TIMEOUT_S) == 0
    finally:
        if process.poll() is None:
            process.kill()
        process.wait()


def _open(client: Client, path, text: str) -> str:
    uri = path.as_uri()
    client.notify("textDocument/didOpen", {"textDocument": {
        "uri": uri, "languageId": "seqlang", "version": 1, "text": text}})
    return uri


def _position(text: str, needle: str, extra: int = 0) -> dict:
    offset = text.index(needle) + extra
    line = text.count("\n", 0, offset)
    return {"line": line, "character": offset - (text.rfind("\n", 0, offset) + 1)}


def test_diagnostic_at_the_right_range_then_cleared(client, workdir):
    uri = _open(client, workdir / "edited.seq", BROKEN)
    diagnostics = client.diagnostics_for(uri)
    assert len(diagnostics) == 1
    (diagnostic,) = diagnostics
    # `3 MHz` is on the 7th line (index 6), columns 7..12 (0-based, end exclusive).
    assert diagnostic["range"] == {"start": {"line": 6, "character": 7}, "end": {"line": 6, "character": 12}}
    assert "duration" in diagnostic["message"] and diagnostic["severity"] == 1
    client.notify("textDocument/didChange", {"textDocument": {"uri": uri, "version": 2},
                                             "contentChanges": [{"text": FIXED}]})
    assert client.diagnostics_for(uri) == []


def test_syntax_error_is_reported_where_the_checker_puts_it(client, workdir):
    uri = _open(client, workdir / "syntax.seq", 'use "millpond.rig"\nsite d = na at (0, 0) um;\n')
    (diagnostic,) = client.diagnostics_for(uri)
    assert diagnostic["range"]["start"] == {"line": 1, "character": 24}
    assert "unexpected character" in diagnostic["message"]


def test_hover_on_a_pulse_shows_what_the_compiler_made(client, workdir):
    text = (workdir / "rabi_ramsey.seq").read_text()
    uri = _open(client, workdir / "rabi_ramsey.seq", text)
    assert client.diagnostics_for(uri) == []
    result = client.request("textDocument/hover", {"textDocument": {"uri": uri},
                                                    "position": _position(text, "pulse mw_cs area pi/2")})
    shown = result["contents"]["value"]
    # A pi/2 pulse at the drive's maximum of 18 kHz lasts 1/(4 * 18 kHz) = 13.89 us (Rabi formula,
    # rounded to the 2 ns tick): an analytic result independent of the compiler.
    assert "13.88" in shown or "13.89" in shown
    area = float(re.search(r"area: ([0-9.]+) π", shown).group(1))
    assert area == pytest.approx(0.5, abs=1e-3)


def test_hover_on_a_let_shows_its_value_with_units(client, workdir):
    text = (workdir / "cz_global.seq").read_text()
    uri = _open(client, workdir / "cz_global.seq", text)
    client.diagnostics_for(uri)
    result = client.request("textDocument/hover", {"textDocument": {"uri": uri},
                                                    "position": _position(text, "let delta", 5)})
    # 0.377371 * 1.3 MHz = 490.582 kHz (arithmetic).
    assert "490.582 kHz" in result["contents"]["value"]


def test_definition_of_a_drive_is_in_the_rig_file(client, workdir):
    text = (workdir / "rabi_ramsey.seq").read_text()
    uri = (workdir / "rabi_ramsey.seq").as_uri()
    result = client.request("textDocument/definition", {"textDocument": {"uri": uri},
                                                         "position": _position(text, "mw_cs", 2)})
    rig_text = (workdir / "millpond.rig").read_text()
    assert result["uri"].endswith("millpond.rig")
    assert result["range"]["start"] == _position(rig_text, "mw_cs microwave")


def test_definition_of_a_site(client, workdir):
    text = (workdir / "cz_global.seq").read_text()
    uri = (workdir / "cz_global.seq").as_uri()
    result = client.request("textDocument/definition", {"textDocument": {"uri": uri},
                                                         "position": _position(text, "tau = ", 1)})
    assert result["range"]["start"] == _position(text, "tau = ")


def test_completion_offers_pulse_keys_names_and_units(client, workdir):
    text = (workdir / "rabi_ramsey.seq").read_text()
    uri = (workdir / "rabi_ramsey.seq").as_uri()
    result = client.request("textDocument/completion", {"textDocument": {"uri": uri},
                                                         "position": _position(text, "pulse mw_cs area", 12)})
    labels = [item["label"] for item in result["items"]]
    assert {"area", "duration", "detuning", "mw_cs", "c0", "t_ramsey", "us", "MHz", "pulse"} <= set(labels)
    assert labels.index("area") < labels.index("pulse")  # property keys come first


def test_outline_lists_the_declarations(client, workdir):
    uri = (workdir / "rabi_ramsey.seq").as_uri()
    result = client.request("textDocument/documentSymbol", {"textDocument": {"uri": uri}})
    assert [s["name"] for s in result] == ["c0", "t_ramsey", "rabi_ramsey"]


def test_hover_on_a_site_and_a_drive(client, workdir):
    text = (workdir / "bell_pair.seq").read_text()
    uri = _open(client, workdir / "bell_pair.seq", text)
    client.diagnostics_for(uri)
    site = client.request("textDocument/hover", {"textDocument": {"uri": uri},
                                                  "position": _position(text, "site h", 5)})["contents"]["value"]
    # d at (0, 0) um and h at (4.0, 0) um are 4 um apart (geometry of the demo file).
    assert "species `cs`" in site and "`d` (na) at 4 um" in site
    drive = client.request("textDocument/hover", {"textDocument": {"uri": uri},
                                                   "position": _position(text, "mw_na", 1)})["contents"]["value"]
    assert "22 kHz" in drive and "microwave" in drive


def test_references_span_the_sequence_and_the_rig(client, workdir):
    text = (workdir / "bell_pair.seq").read_text()
    uri = (workdir / "bell_pair.seq").as_uri()
    result = client.request("textDocument/references", {"textDocument": {"uri": uri},
                                                         "position": _position(text, "mw_na", 1),
                                                         "context": {"includeDeclaration": True}})
    places = {(r["uri"].rsplit("/", 1)[-1], r["range"]["start"]["line"]) for r in result}
    assert ("bell_pair.seq", 10) in places and ("bell_pair.seq", 17) in places
    assert any(name == "millpond.rig" for name, _ in places)
