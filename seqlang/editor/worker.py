"""A child process that runs the language server's heavy work under a budget.

Checking a program can be slow (10⁶ pulses), unbounded (nested repeats) or
memory-hungry (a huge include), and formatting re-parses the whole text. The
server hands such jobs to a :class:`Worker`: a separate Python process with an
address-space limit (``RLIMIT_AS``) that the server kills when a job runs over
its time, or when a newer edit makes the job stale. The server's own process
only ever reads finished results, so it keeps answering.

Children are forked from a ``forkserver`` that has imported the checker once,
so a child killed for its budget is replaced in milliseconds. Jobs and results
travel as pickles over a ``multiprocessing`` pipe; both ends are this module,
in processes of the same user.

>>> worker = Worker(Budget(seconds=5, memory_mb=1024))
>>> worker.run("format", "let  a=1\\n", "x.seq").value   # doctest: +SKIP
([(0, 2, 'let a = 1\\n')], ())
"""
from __future__ import annotations

import os
import pickle
import threading
import time
from dataclasses import dataclass

START_TIMEOUT_S = 120.0  # the first start imports the checker; on a loaded machine that takes a while
PRELOAD = ["seqlang.editor.analysis", "seqlang.editor.format_edits", "seqlang.compile.pipeline"]

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
        self._child = None  # (process, connection)
        self._lock = threading.Lock()  # one job at a time
        self._cancelled = threading.Event()

    def run(self, job: str, *args) -> Outcome:
        """Run `job(*args)` in the child within the budget; never raises."""
        with self._lock:
            self._cancelled.clear()
            try:
                connection = self._ready()
                connection.send((job, args))
            except (OSError, EOFError, ValueError, pickle.PicklingError) as exc:
                self._stop()
                return Outcome(CRASHED, detail=str(exc))
            outcome = self._await(connection)
            if outcome.status != OK:
                self._stop()
        if outcome.status != OK:
            threading.Thread(target=self.start, daemon=True).start()  # the next job finds a child ready
        return outcome

    def start(self) -> None:
        """Start the child now rather than at the first job."""
        with self._lock:
            try:
                self._ready()
            except (OSError, EOFError, ValueError):
                self._stop()

    def cancel(self) -> None:
        """Stop the running job (its caller gets `CANCELLED`); the next job starts a fresh child."""
        self._cancelled.set()
        child = self._child
        if child is not None and child[0].is_alive():
            child[0].kill()

    def close(self) -> None:
        """Stop the child for good (the server is shutting down)."""
        self.cancel()
        with self._lock:
            self._stop()

    # ---- the child's life ----------------------------------------------------------
    def _ready(self):
        if self._child is not None and self._child[0].is_alive():
            return self._child[1]
        self._stop()
        context = _context()
        ours, theirs = context.Pipe()
        process = context.Process(target=_child_main, args=(theirs, self.budget.memory_mb, os.getpid()),
                                  name="seqlang-lsp-worker", daemon=True)
        process.start()
        theirs.close()
        self._child = (process, ours)
        if not ours.poll(START_TIMEOUT_S) or ours.recv() != ("ready",):
            raise EOFError("the worker did not start")
        return ours

    def _await(self, connection) -> Outcome:
        deadline = time.monotonic() + self.budget.seconds
        try:
            while not connection.poll(0.1):
                if self._cancelled.is_set():
                    return Outcome(CANCELLED)
                if time.monotonic() > deadline:
                    return Outcome(TIMEOUT, detail=f"{self.budget.seconds:g} s")
            status, value = connection.recv()
        except (EOFError, OSError, pickle.UnpicklingError):
            if self._cancelled.is_set():
                return Outcome(CANCELLED)
            return Outcome(CRASHED, detail="the worker process ended")
        if status == MEMORY:
            return Outcome(MEMORY, detail=f"{self.budget.memory_mb} MiB")
        if status == FAILED:
            return Outcome(FAILED, detail=value)
        return Outcome(OK, value)

    def _stop(self) -> None:
        child, self._child = self._child, None
        if child is None:
            return
        process, connection = child
        if process.is_alive():
            process.kill()
        process.join()
        connection.close()


_CONTEXT = None


def _context():
    """A forkserver context whose server has imported the checker (once per server process)."""
    global _CONTEXT
    if _CONTEXT is None:
        import multiprocessing
        for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
            os.environ.setdefault(name, "1")  # one thread each: the budget is per process
        context = multiprocessing.get_context("forkserver")
        context.set_forkserver_preload(PRELOAD)
        _CONTEXT = context
    return _CONTEXT


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


def _child_main(connection, memory_mb: int, owner: int) -> None:
    """The child: limit the address space, then answer jobs until the pipe closes."""
    import resource
    limit = memory_mb * 1024 * 1024
    resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    threading.Thread(target=_end_with, args=(owner,), daemon=True).start()
    jobs = _jobs()
    connection.send(("ready",))
    while True:
        try:
            name, args = connection.recv()
        except EOFError:
            return
        reply = _run_job(jobs[name], args)
        try:
            connection.send(reply)
        except MemoryError:
            connection.send((MEMORY, None))


def _end_with(owner: int) -> None:
    """End this child when the server that owns it is gone (even in the middle of a job)."""
    while True:
        time.sleep(1.0)
        try:
            os.kill(owner, 0)
        except ProcessLookupError:
            os._exit(0)
        except PermissionError:
            pass


def _run_job(function, args) -> tuple:
    try:
        return OK, function(*args)
    except MemoryError:
        return MEMORY, None
    except RecursionError:
        return FAILED, "the program nests too deeply to check"
    except Exception as exc:  # a bug in a check must not end the worker's reply
        return FAILED, f"{type(exc).__name__}: {exc}"
