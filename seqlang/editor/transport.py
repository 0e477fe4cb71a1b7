"""The server's guard at the wire: bounded message sizes and checked positions.

* A ``Content-Length`` above :data:`MAX_MESSAGE_BYTES` is refused: the body is
  skipped up to the next header and the client is told in a log message, so the
  server neither allocates the claimed size nor exits.
* A request whose positions are negative, not whole numbers or absurdly large
  gets a JSON-RPC error response (``InvalidParams``, as the Language Server
  Protocol 3.17 specification asks), where the protocol library would
  otherwise drop it without an answer.
"""
from __future__ import annotations

import re
from typing import Any

from pygls.exceptions import JsonRpcException, JsonRpcInvalidParams
from pygls.io_ import StdinAsyncReader
from pygls.protocol import LanguageServerProtocol

MAX_MESSAGE_BYTES = 32 * 1024 * 1024
MAX_POSITION = 2**31 - 1  # LSP's uinteger
HEADER = re.compile(rb"^Content-Length:\s*(\d+)\s*$", re.IGNORECASE)
NEXT_HEADER = b"Content-Length:"


class GuardedReader(StdinAsyncReader):
    """stdin for pygls' message loop, refusing oversized messages."""

    def __init__(self, stdin, executor=None, on_refused=None):
        super().__init__(stdin, executor)
        self.on_refused = on_refused or (lambda size: None)
        self._pending = b""  # the start of the next header, found while skipping

    def readline(self):
        return self.loop.run_in_executor(self.executor, self._readline)

    def _readline(self) -> bytes:
        line = self._take_line()
        match = HEADER.match(line)
        if match and int(match.group(1)) > MAX_MESSAGE_BYTES:
            self.on_refused(int(match.group(1)))
            self._skip_to_next_header()
            return self._take_line()
        return line

    def _take_line(self) -> bytes:
        if self._pending:
            newline = self._pending.find(b"\n")
            if newline >= 0:
                line, self._pending = self._pending[:newline + 1], self._pending[newline + 1:]
                return line
            line, self._pending = self._pending + self.stdin.readline(), b""
            return line
        return self.stdin.readline()

    def _skip_to_next_header(self) -> None:
        # The refused message's length is unknown (it lied): drop bytes until a header starts.
        buffer = self._pending
        self._pending = b""
        while True:
            found = buffer.find(NEXT_HEADER, 1 if buffer.startswith(NEXT_HEADER) else 0)
            if found >= 0:
                self._pending = buffer[found:]
                return
            chunk = self.stdin.read1(65536) if hasattr(self.stdin, "read1") else self.stdin.read(1)
            if not chunk:
                return
            buffer = buffer[-len(NEXT_HEADER):] + chunk

    def readexactly(self, n: int):
        return self.loop.run_in_executor(self.executor, self._readexactly, n)

    def _readexactly(self, n: int) -> bytes:
        head, self._pending = self._pending[:n], self._pending[n:]
        return head + (self.stdin.read(n - len(head)) if n > len(head) else b"")


class GuardedProtocol(LanguageServerProtocol):
    """Answers malformed requests with an error instead of dropping them."""

    def structure_message(self, data: dict[str, Any]):
        if "jsonrpc" not in data:
            return data  # an inner object of the message being decoded
        problem = bad_position(data.get("params"))
        try:
            if problem:
                raise JsonRpcInvalidParams(problem)
            return super().structure_message(data)
        except JsonRpcException as exc:
            if "id" in data and "method" in data:
                self._send_response(data["id"], error=_with_detail(exc, problem))
            raise


def _with_detail(exc: JsonRpcException, problem: str | None):
    error = exc.to_response_error()
    if not problem and isinstance(exc, JsonRpcInvalidParams):
        error.message = "Invalid Params: the request's parameters do not have the protocol's shape"
    return error


def bad_position(params, where: str = "params") -> str | None:
    """Words for the first position that is not a valid LSP position, or None."""
    if isinstance(params, dict):
        for key, value in params.items():
            if key in ("line", "character") and "line" in params and "character" in params:
                if type(value) is not int or not 0 <= value <= MAX_POSITION:
                    return f"{where}.{key} must be a whole number from 0 to {MAX_POSITION}, got {value!r}"
            elif isinstance(value, (dict, list)):
                found = bad_position(value, f"{where}.{key}")
                if found:
                    return found
    elif isinstance(params, list):
        for index, value in enumerate(params[:1000]):
            found = bad_position(value, f"{where}[{index}]")
            if found:
                return found
    return None
