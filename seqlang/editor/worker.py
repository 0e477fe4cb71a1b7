"""A child process that runs the language server's heavy work under a budget.

Checking a program can be slow (10⁶ pulses), unbounded (nested repeats) or
memory-hungry (a huge include), and formatting re-parses the whole text. The
server hands such jobs to a :class:`Worker`: a separate Python process with an
address-space limit (``RLIMIT_AS``) that the server kills when a job runs over
its time, or when a newer edit makes the job stale. The server's own process
only ever reads finished results, so it keeps answering.

Frames on the pipes are an 8-byte length and a pickle; both ends are this
module, started by the same user.

>>> worker = Worker(Budget(seconds=5, memory_mb=1024))
>>> worker.run("format", "let  a=1\\n", "x.seq").value   # doctest: +SKIP
([(0, 2, 'let a = 1\\n')], ())
"""
from __future__ import annotations

import os
import pickle
import select
import struct
import subprocess
import sys
import threading
import time
from dataclasses import dataclass

HEADER = struct.Struct("<Q")
START_TIMEOUT_S = 120.0  # importing the checker on a loaded machine can take a while

OK, TIMEOUT, MEMORY, CANCELLED, CRASHED, FAILED = "ok", "timeout", "memory", "cancelled", "crashed", "failed"


@dataclass(frozen=True)
class Budget:
    """How long one job may run and how much memory the worker may map."""

    seconds: float = 10.0
    memory_mb: int = 2048

    @classmethod
    def from_environment(cls) -> "Budget":
        """`SEQLANG_LSP_CHECK_SECONDS` and `SEQLANG_LSP_MEMORY_MB`, when set."""
        default = cls()
        return cls(_env_number("SEQLANG_LSP_CHECK_SECONDS", default.seconds, float),
                   _env_number("SEQLANG_LSP_MEMORY_MB", default.memory_mb, int))


def _env_number(name: str, default, kind):
    try:
        value = kind(os.environ.get(name, default))
    except ValueError:
        return default
    return value if value > 0 else default


@dataclass(frozen=True)
class Outcome:
    """How a job ended (`OK`, `TIMEOUT`, ...) and its value or the reason."""

    status: str
    value: object = None
    detail: str = ""


class Worker:
    """One child process, restarted on demand; one job at a time."""

    def __init__(self, budget: Budget):
        self.budget = budget
        self._process: subprocess.Popen | None = None
        self._lock = threading.Lock()  # one job at a time
        self._cancelled = threading.Event()

    def run(self, job: str, *args) -> Outcome:
        """Run `job(*args)` in the child within the budget; never raises."""
        with self._lock:
            self._cancelled.clear()
            try:
                process = self._ready()
                _write_frame(process.stdin, (job, args))
            except (OSError, EOFError, pickle.PicklingError) as exc:
                self._stop()
                return Outcome(CRASHED, detail=str(exc))
            outcome = self._await(process)
            if outcome.status != OK:
                self._stop()
            return outcome

    def cancel(self) -> None:
        """Stop the running job (its caller gets `CANCELLED`); the next job starts a fresh child."""
        self._cancelled.set()
        process = self._process
        if process is not None and process.poll() is None:
            process.kill()

    def close(self) -> None:
        """Stop the child for good (the server is shutting down)."""
        self.cancel()
        with self._lock:
            self._stop()

    # ---- the child's life ----------------------------------------------------------
    def _ready(self) -> subprocess.Popen:
        if self._process is not None and self._process.poll() is None:
            return self._process
        self._stop()
        env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
        self._process = subprocess.Popen(
            [sys.executable, "-m", "seqlang.editor.worker", str(self.budget.memory_mb)],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, env=env)
        status = _read_frame(self._process.stdout, time.monotonic() + START_TIMEOUT_S, self._cancelled)
        if status != ("ready",):
            raise EOFError("the worker did not start")
        return self._process

    def _await(self, process: subprocess.Popen) -> Outcome:
        deadline = time.monotonic() + self.budget.seconds
        try:
            reply = _read_frame(process.stdout, deadline, self._cancelled)
        except TimeoutError:
            return Outcome(TIMEOUT, detail=f"{self.budget.seconds:g} s")
        except (EOFError, OSError, pickle.UnpicklingError):
            if self._cancelled.is_set():
                return Outcome(CANCELLED)
            return Outcome(CRASHED, detail="the worker process ended")
        status, value = reply
        if status == MEMORY:
            return Outcome(MEMORY, detail=f"{self.budget.memory_mb} MiB")
        if status == FAILED:
            return Outcome(FAILED, detail=value)
        return Outcome(OK, value)

    def _stop(self) -> None:
        process, self._process = self._process, None
        if process is None:
            return
        if process.poll() is None:
            process.kill()
        process.wait()
        for stream in (process.stdin, process.stdout):
            try:
                stream.close()
            except OSError:
                pass


# ---- frames ---------------------------------------------------------------------------
def _write_frame(stream, obj) -> None:
    body = pickle.dumps(obj, protocol=pickle.HIGHEST_PROTOCOL)
    stream.write(HEADER.pack(len(body)) + body)
    stream.flush()


def _read_frame(stream, deadline: float, cancelled: threading.Event):
    header = _read_exactly(stream, HEADER.size, deadline, cancelled)
    (size,) = HEADER.unpack(header)
    return pickle.loads(_read_exactly(stream, size, deadline, cancelled))


def _read_exactly(stream, size: int, deadline: float, cancelled: threading.Event) -> bytes:
    chunks, missing, fd = [], size, stream.fileno()
    while missing:
        if cancelled.is_set():
            raise EOFError("cancelled")
        remaining = deadline - time.monotonic()
        if remaining <= 0:
            raise TimeoutError
        readable, _, _ = select.select([fd], [], [], min(remaining, 0.2))
        if not readable:
            continue
        chunk = os.read(fd, min(missing, 1 << 20))
        if not chunk:
            raise EOFError("the worker closed its pipe")
        chunks.append(chunk)
        missing -= len(chunk)
    return b"".join(chunks)


# ---- the child ----------------------------------------------------------------------------
def _jobs() -> dict:
    from .analysis import analyse
    from .format_edits import document_edits, range_edits
    return {"analyse": analyse, "format": _refusable(document_edits), "format_range": _refusable(range_edits)}


def _refusable(function):
    """(the function's result, ()) or (None, the diagnostics with which the formatter refuses)."""
    from ..lang.diagnostics import SeqlangError

    def run(*args):
        try:
            return function(*args), ()
        except SeqlangError as exc:
            return None, exc.diagnostics
    return run


def _child_main(memory_mb: int) -> None:
    import resource
    limit = memory_mb * 1024 * 1024
    resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    stdin, stdout = sys.stdin.buffer, sys.stdout.buffer
    sys.stdout = sys.stderr  # a stray print must not corrupt the frames
    jobs = _jobs()
    _write_frame(stdout, ("ready",))
    while True:
        header = stdin.read(HEADER.size)
        if len(header) < HEADER.size:
            return
        name, args = pickle.loads(stdin.read(HEADER.unpack(header)[0]))
        reply = _run_job(jobs[name], args)
        try:
            _write_frame(stdout, reply)
        except MemoryError:
            _write_frame(stdout, (MEMORY, None))


def _run_job(function, args) -> tuple:
    try:
        return OK, function(*args)
    except MemoryError:
        return MEMORY, None
    except RecursionError:
        return FAILED, "the program nests too deeply to check"
    except Exception as exc:  # a bug in a check must not end the worker's reply
        return FAILED, f"{type(exc).__name__}: {exc}"


if __name__ == "__main__":
    _child_main(int(sys.argv[1]))
