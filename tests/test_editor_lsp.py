"""`seqlang lsp` driven by a small raw client: JSON-RPC over stdio with Content-Length framing.

Raw JSON-RPC is needed for the robustness checks (a typed client cannot send a negative
position or a lying Content-Length): each awkward request is sent to the real server,
then a normal hover must still be answered. The framing, the messages, the error code
-32602 (InvalidParams) and the rule that a position past the end of a line means the end
of the line follow the Language Server Protocol specification (Microsoft, LSP 3.17, 2022).
The features over a typed client are in test_editor_lsp_features.py.
"""
from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
import threading
import time
import queue

import pytest

PROGRAMS = os.path.join(os.path.dirname(__file__), "..", "programs")
TIMEOUT_S = 30
FOLLOW_UP_S = 10  # the follow-up hover: generous, the machine is shared (no speed is measured)
CHECK_BUDGET_S = 2

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
        self.backlog: list = []  # messages received while waiting for another one
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

    def wait_for(self, matches, timeout: float = TIMEOUT_S) -> dict:
        for message in self.backlog:
            if matches(message):
                self.backlog.remove(message)
                return message
        deadline = time.monotonic() + timeout
        while True:
            message = self.inbox.get(timeout=max(deadline - time.monotonic(), 0.001))
            if matches(message):
                return message
            self.backlog.append(message)

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
    env = {**os.environ, "SEQLANG_LSP_CHECK_SECONDS": str(CHECK_BUDGET_S), "SEQLANG_LSP_MEMORY_MB": "600"}
    process = subprocess.Popen([sys.executable, "-m", "seqlang", "lsp"], stdin=subprocess.PIPE,
                               stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, env=env)
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


def test_crlf_line_ends_give_the_same_positions(client, workdir):
    # LSP 3.17: CR LF and CR end a line as LF does; the parser counts them the same way.
    uri = _open(client, workdir / "crlf.seq", BROKEN.replace("\n", "\r\n"))
    (diagnostic,) = client.diagnostics_for(uri)
    assert diagnostic["range"] == {"start": {"line": 6, "character": 7}, "end": {"line": 6, "character": 12}}
    result = client.request("textDocument/completion", {"textDocument": {"uri": uri},
                                                         "position": _position(BROKEN, "pulse mw_na", 6)})
    assert "mw_na" in [item["label"] for item in result["items"]]


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


def test_completion_offers_the_pulse_keys_not_yet_given(client, workdir):
    text = (workdir / "rabi_ramsey.seq").read_text()
    uri = (workdir / "rabi_ramsey.seq").as_uri()
    result = client.request("textDocument/completion", {"textDocument": {"uri": uri},
                                                         "position": _position(text, "pulse mw_cs area", 12)})
    labels = [item["label"] for item in result["items"]]
    # `on` (no targets yet), then the pulse properties except `area`, which the line already gives.
    assert labels == ["on", "duration", "rabi", "detuning", "phase", "shape"]


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


# ---- robustness: every request gets an answer, and the server keeps serving -------------------
SLOW_PULSES = """use "millpond.rig"
site d = na at (0, 0) um
sequence many {
  repeat 1000000 { pulse mw_na area pi }
}
"""
NESTED_WAITS = """use "millpond.rig"
site d = na at (0, 0) um
sequence nested {
  repeat 100000 { repeat 100000 { wait 1 us } }
}
"""


@pytest.fixture(scope="module")
def server(client, workdir):
    """(client, uri, text) of a document whose hover is the follow-up check."""
    text = (workdir / "rabi_ramsey.seq").read_text()
    uri = _open(client, workdir / "follow_up.seq", text)
    assert client.diagnostics_for(uri) == []
    return client, uri, text


def raw_request(client: Client, method: str, params) -> dict:
    """The whole reply (result or error) to one request."""
    client.next_id += 1
    number = client.next_id
    client.send({"id": number, "method": method, "params": params})
    return client.wait_for(lambda m: m.get("id") == number and "method" not in m)


def still_answers(server) -> None:
    """A normal hover on a pulse is answered, with what the compiler made of it."""
    client, uri, text = server
    client.next_id += 1
    number = client.next_id
    client.send({"id": number, "method": "textDocument/hover",
                 "params": {"textDocument": {"uri": uri}, "position": _position(text, "pulse mw_cs area pi/2")}})
    message = client.wait_for(lambda m: m.get("id") == number and "method" not in m, FOLLOW_UP_S)
    # A pi/2 pulse at mw_cs's 18 kHz maximum lasts 1 / (4 * 18 kHz) = 13.89 us (Rabi formula).
    assert "13.8" in message["result"]["contents"]["value"]


def test_completion_beyond_the_end_of_a_line_or_file(server):
    client, uri, text = server
    for line, character in ((0, 500), (10**6, 3)):
        reply = raw_request(client, "textDocument/completion",
                            {"textDocument": {"uri": uri}, "position": {"line": line, "character": character}})
        assert "result" in reply, reply
    still_answers(server)


@pytest.mark.parametrize("line, character", [(-1, 0), (0, -5), (1.5, 0), (0, "3"), (2**40, 0)])
def test_an_invalid_position_gets_an_error_response(server, line, character):
    client, uri, _ = server
    reply = raw_request(client, "textDocument/hover",
                        {"textDocument": {"uri": uri}, "position": {"line": line, "character": character}})
    assert reply["error"]["code"] == -32602
    still_answers(server)


def test_a_request_without_its_parameters_gets_an_error_response(server):
    client, _, _ = server
    assert raw_request(client, "textDocument/hover", {})["error"]["code"] == -32602
    still_answers(server)


def test_a_document_never_opened_is_not_read_from_disk(server, workdir):
    client, _, _ = server
    # A named pipe: reading it would block the server for good, so an answer proves it was not read.
    fifo = workdir / "never_opened.seq"
    os.mkfifo(fifo)
    for method, extra in (("textDocument/hover", {"position": {"line": 0, "character": 0}}),
                          ("textDocument/completion", {"position": {"line": 0, "character": 0}}),
                          ("textDocument/documentSymbol", {}),
                          ("textDocument/formatting", {"options": {"tabSize": 2, "insertSpaces": True}})):
        reply = raw_request(client, method, {"textDocument": {"uri": fifo.as_uri()}, **extra})
        assert reply["error"]["code"] == -32602 and "not open" in reply["error"]["message"]
    still_answers(server)


def test_a_huge_document_is_not_checked(server, workdir):
    client, _, _ = server
    text = 'use "millpond.rig"\n' + "# padding\n" * 500_000
    uri = _open(client, workdir / "huge.seq", text)
    (diagnostic,) = client.diagnostics_for(uri)
    assert "not checked" in diagnostic["message"] and "characters" in diagnostic["message"]
    assert "result" in raw_request(client, "textDocument/completion",
                                   {"textDocument": {"uri": uri}, "position": {"line": 3, "character": 0}})
    still_answers(server)


def test_a_slow_check_is_stopped_by_its_budget_and_the_server_answers_meanwhile(server, workdir):
    client, _, _ = server
    uri = _open(client, workdir / "many_pulses.seq", SLOW_PULSES)
    still_answers(server)  # while the 10^6 pulses are being checked
    (diagnostic,) = client.diagnostics_for(uri)
    assert f"took longer than the editor's budget of {CHECK_BUDGET_S} s" in diagnostic["message"]
    still_answers(server)


def test_nested_repeats_of_waits_do_not_hang_the_server(server, workdir):
    client, _, _ = server
    uri = _open(client, workdir / "nested_waits.seq", NESTED_WAITS)
    still_answers(server)
    assert client.diagnostics_for(uri), "a diagnostic (a limit, or the budget) must arrive"
    still_answers(server)


def test_an_include_of_dev_zero_does_not_grow_the_server(server, workdir):
    client, _, _ = server
    uri = _open(client, workdir / "zero.seq", 'use "/dev/zero"\nsite d = na at (0, 0) um\n')
    still_answers(server)
    assert client.diagnostics_for(uri), "a diagnostic (refused, or over the memory budget) must arrive"
    still_answers(server)


def test_a_new_edit_cancels_the_stale_check(server, workdir):
    client, _, _ = server
    uri = _open(client, workdir / "edited_while_slow.seq", SLOW_PULSES)
    time.sleep(1.0)  # the slow check is under way
    fixed = SLOW_PULSES.replace("repeat 1000000", "repeat 2")
    client.notify("textDocument/didChange", {"textDocument": {"uri": uri, "version": 2},
                                             "contentChanges": [{"text": fixed}]})
    client.wait_for(lambda m: m.get("method") == "window/logMessage"
                    and "cancelled the check" in m["params"]["message"])
    assert client.diagnostics_for(uri) == []
    still_answers(server)


def test_an_absurd_content_length_is_refused_without_exiting(server):
    client, _, _ = server
    body = b'{"jsonrpc": "2.0", "method": "initialized", "params": {}}'
    client.process.stdin.write(b"Content-Length: 99999999999999\r\n\r\n" + body)
    client.process.stdin.flush()
    refused = client.wait_for(lambda m: m.get("method") == "window/logMessage"
                              and "refused a message" in m["params"]["message"])
    assert "99,999,999,999,999 bytes" in refused["params"]["message"]
    still_answers(server)
