"""Check + compile time and peak memory for generated programs of 10k and 100k pulses.

Run:  python benchmarks/bench_compile.py [--quick] [--million] [--baseline REF] [--repeat N]

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
CPU (``time.process_time``: user + system, the primary figure on a shared
machine) and wall-clock of the check+compile alone. ``--repeat N`` (default 3) runs
every measurement N times and keeps the run of least CPU: on a shared virtual machine
single runs of the same code differ by up to a fifth, and the fastest run is the one
least disturbed (common practice for timing benchmarks). Not a test.
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
REPEAT = 3  # runs per measurement (--repeat)
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
start, cpu = time.perf_counter(), time.process_time()
sequence = seqlang.load(sys.argv[1])
sequence.compile()
elapsed, used = time.perf_counter() - start, time.process_time() - cpu
assert len(sequence.timeline.pulses()) == int(sys.argv[3])
print(json.dumps({"seconds": elapsed, "cpu": used,
                  "rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def measure(text: str, pulses: int, workdir: str, code: str | None = None) -> dict:
    """Check+compile in fresh processes (REPEAT of them), with this tree's code or the code at
    `code`; the run of least CPU."""
    return min((_measure_once(text, pulses, workdir, code) for _ in range(REPEAT)), key=lambda r: r["cpu"])


def _measure_once(text: str, pulses: int, workdir: str, code: str | None) -> dict:
    """One check+compile in a fresh process."""
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


def _cell(r: dict | None) -> str:
    if r is None:
        return f"{'—':>28}"
    return f"{r['cpu']:6.2f} s {r['seconds']:6.2f} s {r['rss_mib']:6.0f} MiB"


def _table(results: dict, sizes: tuple[int, int], label: str) -> list[str]:
    """One line per shape: CPU, wall and peak RSS at both sizes, and the large/small ratios."""
    small, large = sizes
    head = (f"{label:<8} {'':7} {f'{small:,} pulses (cpu, wall, rss)':>28} | "
            f"{f'{large:,} pulses (cpu, wall, rss)':>28} | ratio cpu, wall")
    lines = [head]
    for shape in ("flat", "folded"):
        a, b = results[shape][small], results[shape][large]
        lines.append(f"{'':8} {shape:<7} {_cell(a)} | {_cell(b)} | "
                     f"{b['cpu'] / a['cpu']:5.2f}, {b['seconds'] / a['seconds']:5.2f}")
    return lines


def _verdict(results: dict, sizes: tuple[int, int]) -> str:
    flat = results["flat"][sizes[1]]
    ratios = [results[s][sizes[1]]["cpu"] / results[s][sizes[0]]["cpu"] for s in ("flat", "folded")]
    return (f"targets (CPU): flat {sizes[1]:,} under 5 s: {'yes' if flat['cpu'] < 5 else 'no'}; "
            f"under 300 MiB: {'yes' if flat['rss_mib'] < 300 else 'no'}; "
            f"ratios <= 11: {'yes' if max(ratios) <= 11 else 'no'}")


def main() -> int:
    global REPEAT
    REPEAT = int(sys.argv[sys.argv.index("--repeat") + 1]) if "--repeat" in sys.argv else REPEAT
    sizes = (1_000, 10_000) if "--quick" in sys.argv else (10_000, 100_000)
    baseline = sys.argv[sys.argv.index("--baseline") + 1] if "--baseline" in sys.argv else None
    workdir = tempfile.mkdtemp(prefix="seqlang-bench-")
    shutil.copy(RIG, workdir)
    shapes = {"flat": generate_flat, "folded": generate_folded}
    print(f"load average at start: {' '.join(f'{x:.1f}' for x in os.getloadavg())} on {os.cpu_count()} cores; "
          f"each figure the least-CPU run of {REPEAT}", flush=True)
    try:
        code = _export(baseline, tempfile.mkdtemp(dir=workdir)) if baseline else None
        ours = {s: {n: measure(g(n), n, workdir) for n in sizes} for s, g in shapes.items()}
        print("\n".join(_table(ours, sizes, "this tree")), flush=True)
        if code:
            base = {s: {n: measure(g(n), n, workdir, code) for n in sizes} for s, g in shapes.items()}
            print("\n".join(_table(base, sizes, baseline)), flush=True)
            print("cpu speed-up: " + ", ".join(f"{s} {n:,} {base[s][n]['cpu'] / ours[s][n]['cpu']:.2f}x"
                                               for s in shapes for n in sizes), flush=True)
        print(_verdict(ours, sizes), flush=True)
        if "--million" in sys.argv:
            r = measure(generate_folded(1_000_000), 1_000_000, workdir)
            print(f"{'':8} folded 1,000,000 pulses: {_cell(r)}  (target < 40 s CPU: "
                  f"{'yes' if r['cpu'] < 40 else 'no'})", flush=True)
        print(f"load average at end: {' '.join(f'{x:.1f}' for x in os.getloadavg())}", flush=True)
    finally:
        shutil.rmtree(workdir)
    return 0


if __name__ == "__main__":
    sys.exit(main())
