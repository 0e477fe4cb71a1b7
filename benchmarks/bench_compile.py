"""Check + compile time and peak memory for generated programs of 10k and 100k pulses.

Run:  python benchmarks/bench_compile.py [--quick] [--million] [--baseline REF]

Two shapes of program are generated:
* ``flat``: one text line per pulse (100k lines); the time is dominated by parsing;
* ``folded``: the same pulses written with ``repeat`` (a few lines of text); the
  time is that of the checker, lowering, tick quantization and hardware plan.
Targets: flat 100k pulses under 5 s and 300 MiB, the 100k/10k time ratio at most
11 for both shapes (linear growth), and (``--million``) 1,000,000 folded pulses
under 40 s. ``--baseline REF`` also runs the same programs with the code of git
revision REF (exported to a temporary directory) in the same run and prints the
ratios side by side, so that a loaded machine slows both alike. Each measurement
runs in a fresh process, so peak memory (max RSS) is that run's own; times are
wall-clock and CPU (user+system) of the check+compile alone. Not a test.
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
import json, os, resource, sys, time
import seqlang
seqlang.load(sys.argv[2])                      # warm-up: imports and the grammar
start, cpu = time.perf_counter(), os.times()
sequence = seqlang.load(sys.argv[1])
sequence.compile()
elapsed, after = time.perf_counter() - start, os.times()
assert len(sequence.timeline.pulses()) == int(sys.argv[3])
print(json.dumps({"seconds": elapsed, "cpu": after.user - cpu.user + after.system - cpu.system,
                  "rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def measure(text: str, pulses: int, workdir: str, code: str | None = None) -> dict:
    """One check+compile in a fresh process, with this tree's code or the code at `code`."""
    path = os.path.join(workdir, "big.seq")
    warm = os.path.join(workdir, "warm.seq")
    with open(path, "w") as handle:
        handle.write(text)
    with open(warm, "w") as handle:
        handle.write(generate_folded(10))
    env = dict(os.environ, PYTHONPATH=code or os.path.abspath(os.path.join(HERE, "..")))
    out = subprocess.run([sys.executable, "-c", _CHILD, path, warm, str(pulses)],
                         check=True, capture_output=True, text=True, env=env, cwd=workdir)
    return json.loads(out.stdout)


def _export(ref: str, into: str) -> str:
    """The code of git revision `ref`, unpacked into a directory (no worktree is touched)."""
    archive = subprocess.run(["git", "-C", os.path.join(HERE, ".."), "archive", ref],
                             check=True, capture_output=True).stdout
    subprocess.run(["tar", "-x", "-C", into], input=archive, check=True)
    return into


def _row(name: str, n: int, r: dict, base: dict | None) -> str:
    line = (f"{name:>6} {n:>9,} pulses: {r['seconds']:7.2f} s wall, {r['cpu']:7.2f} s cpu, "
            f"peak RSS {r['rss_mib']:7.1f} MiB")
    if base is not None:
        line += (f"   | baseline {base['seconds']:7.2f} s wall, {base['cpu']:7.2f} s cpu, "
                 f"{base['rss_mib']:7.1f} MiB | cpu speed-up {base['cpu'] / r['cpu']:5.2f}x")
    return line


def main() -> int:
    sizes = (1_000, 10_000) if "--quick" in sys.argv else (10_000, 100_000)
    baseline = sys.argv[sys.argv.index("--baseline") + 1] if "--baseline" in sys.argv else None
    workdir = tempfile.mkdtemp(prefix="seqlang-bench-")
    shutil.copy(RIG, workdir)
    try:
        code = _export(baseline, tempfile.mkdtemp(dir=workdir)) if baseline else None
        for name, generate in (("folded", generate_folded), ("flat", generate_flat)):
            results = {n: measure(generate(n), n, workdir) for n in sizes}
            bases = {n: measure(generate(n), n, workdir, code) for n in sizes} if code else {}
            for n, r in results.items():
                print(_row(name, n, r, bases.get(n)), flush=True)
            small, large = (results[n] for n in sizes)
            print(f"{name:>6} {sizes[1]}/{sizes[0]} ratio: {large['seconds'] / small['seconds']:.2f} wall, "
                  f"{large['cpu'] / small['cpu']:.2f} cpu (target <= 11)"
                  + (f"; baseline {bases[sizes[1]]['cpu'] / bases[sizes[0]]['cpu']:.2f} cpu" if bases else "")
                  + f"; largest under 5 s: {'yes' if large['seconds'] < 5 else 'no'}", flush=True)
        if "--million" in sys.argv:
            r = measure(generate_folded(1_000_000), 1_000_000, workdir)
            print(_row("folded", 1_000_000, r, None) + f"  (target < 40 s)", flush=True)
    finally:
        shutil.rmtree(workdir)
    return 0


if __name__ == "__main__":
    sys.exit(main())
