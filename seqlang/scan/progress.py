"""A one-line progress bar on stderr: points done, rate, time left."""
from __future__ import annotations

import sys
import time


def _clock(seconds: float) -> str:
    seconds = int(round(seconds))
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


class Progress:
    """Call :meth:`step` once per finished point, :meth:`close` at the end."""

    def __init__(self, total: int, already: int = 0, enabled: bool | None = None, stream=None):
        self.stream = stream or sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.total, self.already, self.done = total, already, 0
        self.start = time.monotonic()

    def step(self) -> None:
        self.done += 1
        if self.enabled:
            self.stream.write("\r" + self.line())
            self.stream.flush()

    def line(self) -> str:
        elapsed = max(time.monotonic() - self.start, 1e-9)
        rate = self.done / elapsed
        left = (self.total - self.already - self.done) / rate if rate > 0 else 0.0
        width = 24
        filled = int(width * (self.already + self.done) / max(self.total, 1))
        return (f"[{'#' * filled}{'.' * (width - filled)}] {self.already + self.done}/{self.total} points  "
                f"{rate:.2f}/s  {_clock(left)} left ")

    def close(self) -> None:
        if self.enabled and self.done:
            self.stream.write("\n")
            self.stream.flush()
