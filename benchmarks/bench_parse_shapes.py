"""Parse time with line traces against the automaton stepped token by token, side by side.

Run:  python benchmarks/bench_parse_shapes.py [--lines N] [--repeat N]

Generated programs of N lines (default 50,000) drawn at random (seed 7, recorded below)
from 1, 4 or 11 line shapes (pulses with different properties, waits, lets). Each program
is parsed in this process with line traces (seqlang/lang/line_traces.py) and with them
switched off, the least CPU of `--repeat` runs (default 3) each; the ratio is the speed-up
of the traces. A trace needs a line shape (with the first token of the line after it) seen
twice, so programs of many shapes gain less. Not a test.
"""
from __future__ import annotations

import os
import random
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, ".."))

from seqlang.lang import line_traces  # noqa: E402
from seqlang.lang.parser import cyclic_gc_paused, parse_text  # noqa: E402

SEED = 7
SHAPES = [
    "pulse mw_na area {a}pi/8 phase {b} deg",
    "pulse mw_cs area {a}pi",
    "wait {c} us",
    "pulse mw_na duration {c} us phase {b} deg",
    "pulse mw_cs area {a}pi/{a} detuning {c} kHz",
    "let x{a} = {c} us",
    "wait ({c} + {a}) us",
    "pulse mw_na area pi phase -{b} deg",
    "pulse mw_cs rabi {c} kHz duration {a} us",
    "wait {a}.5 ms",
    "pulse mw_na area {a}pi/{a} phase {b} deg detuning {c} Hz",
]


def generate(lines: int, shapes: int, rng: random.Random) -> str:
    body = []
    for _ in range(lines):
        shape = rng.choice(SHAPES[:shapes])
        body.append("  " + shape.format(a=rng.randint(1, 9), b=rng.randint(0, 359), c=rng.randint(1, 99)))
    return 'use "millpond.rig"\nsequence big {\n' + "\n".join(body) + "\n}\n"


def least_cpu(text: str, repeat: int) -> float:
    best = float("inf")
    for _ in range(repeat):
        with cyclic_gc_paused():
            start = time.process_time()
            tree = parse_text(text, "shapes.seq")
            best = min(best, time.process_time() - start)
            del tree
    return best


def main() -> int:
    lines = int(sys.argv[sys.argv.index("--lines") + 1]) if "--lines" in sys.argv else 50_000
    repeat = int(sys.argv[sys.argv.index("--repeat") + 1]) if "--repeat" in sys.argv else 3
    rng = random.Random(SEED)
    parse_text(generate(100, 1, rng), "warm.seq")   # imports and the grammar
    print(f"{lines:,} lines, seed {SEED}, least CPU of {repeat}; load average {os.getloadavg()[0]:.1f}")
    print(f"{'shapes':>6} {'traced':>9} {'stepped':>9} {'speed-up':>9}")
    replay = line_traces.Traces.replay
    for shapes in (1, 4, len(SHAPES)):
        text = generate(lines, shapes, rng)
        traced = least_cpu(text, repeat)
        line_traces.Traces.replay = lambda *args: None   # every line stepped through the automaton
        try:
            stepped = least_cpu(text, repeat)
        finally:
            line_traces.Traces.replay = replay
        print(f"{shapes:>6} {traced:8.2f}s {stepped:8.2f}s {stepped / traced:8.2f}x")
    return 0


if __name__ == "__main__":
    sys.exit(main())
