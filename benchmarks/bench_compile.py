"""Check + compile time and peak memory for generated programs of 10k and 100k pulses.

Run:  python benchmarks/bench_compile.py [--quick]

Two shapes of program are generated:
* ``flat``: one text line per pulse (100k lines); the time is dominated by parsing;
* ``folded``: the same pulses written with ``repeat`` (a few lines of text); the
  time is that of the checker, lowering, tick quantization and hardware plan.
Targets (issue 2): 100k pulses in under 5 s on a 2-core machine, and the
100k/10k time ratio at most 12 (linear growth). Each measurement runs in a fresh
process, so peak memory (max RSS) is that run's own. Not a test: it prints figures.
"""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tempfile

HERE = os.path.dirname(os.path.abspath(__file__))
RIG = os.path.join(HERE, "..", "programs", "millpond.rig")
HEADER = ['use "millpond.rig"', "site a = na at (0, 0) um", "site b = cs at (8, 0) um", "sequence big {"]


def _pulse_line(i: int) -> str:
    drive = "mw_na" if i % 2 == 0 else "mw_cs"
    return f"  pulse {drive} area {1 + i % 7}pi/8 phase {i % 360} deg"


def generate_flat(pulses: int) -> str:
    """One line per pulse, a wait after every ten."""
    lines = list(HEADER)
    for i in range(pulses):
        lines.append(_pulse_line(i))
        if i % 10 == 9:
            lines.append("  wait 1.5 us")
    return "\n".join(lines + ["}"]) + "\n"


def generate_folded(pulses: int) -> str:
    """The same kind of pulses, ten per period inside `repeat`."""
    body = [_pulse_line(i) for i in range(10)] + ["  wait 1.5 us"]
    return "\n".join(HEADER + [f"  repeat {pulses // 10} {{"] + body + ["  }", "}"]) + "\n"


_CHILD = r"""
import json, resource, sys, time
import seqlang
seqlang.load(sys.argv[2])                      # warm-up: imports and the grammar
start = time.perf_counter()
sequence = seqlang.load(sys.argv[1])
sequence.compile()
elapsed = time.perf_counter() - start
assert len(sequence.timeline.pulses()) == int(sys.argv[3])
print(json.dumps({"seconds": elapsed, "rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def measure(text: str, pulses: int, workdir: str) -> dict:
    path = os.path.join(workdir, "big.seq")
    warm = os.path.join(workdir, "warm.seq")
    with open(path, "w") as handle:
        handle.write(text)
    with open(warm, "w") as handle:
        handle.write(generate_folded(10))
    out = subprocess.run([sys.executable, "-c", _CHILD, path, warm, str(pulses)],
                         check=True, capture_output=True, text=True)
    return json.loads(out.stdout)


def main() -> int:
    sizes = (1_000, 10_000) if "--quick" in sys.argv else (10_000, 100_000)
    workdir = tempfile.mkdtemp(prefix="seqlang-bench-")
    shutil.copy(RIG, workdir)
    try:
        for name, generate in (("folded", generate_folded), ("flat", generate_flat)):
            results = {n: measure(generate(n), n, workdir) for n in sizes}
            for n, r in results.items():
                print(f"{name:>6} {n:>7} pulses: check+compile {r['seconds']:7.2f} s, peak RSS {r['rss_mib']:7.1f} MiB")
            small, large = (results[n]["seconds"] for n in sizes)
            print(f"{name:>6} {sizes[1]}/{sizes[0]} time ratio {large / small:.2f} (target <= 12); "
                  f"largest under 5 s: {'yes' if large < 5 else 'no'}")
    finally:
        shutil.rmtree(workdir)
    return 0


if __name__ == "__main__":
    sys.exit(main())
