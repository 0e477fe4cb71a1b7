"""Cold and warm `seqlang check` of the Förster demo (programs/forster_gate.seq).

Run:  python benchmarks/bench_pairs.py

Cold: an empty atomic-data cache, so the pair channels, Le Roy radius,
polarisabilities and the diagonalised pair potential at the field are computed
with the alkali Rydberg calculator. Warm: the same command again with the
filled cache (target < 0.5 s; issue 13). A baseline, `seqlang check` of
programs/rabi_ramsey.seq (no Rydberg pair, so no atomic data at all), runs side
by side and the ratio warm/baseline is printed. Each run is a fresh process.
Not a test: it prints figures.
"""
from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
DEMO = os.path.join(ROOT, "programs", "forster_gate.seq")
BASELINE = os.path.join(ROOT, "programs", "rabi_ramsey.seq")


def timed_check(path: str, cache: str) -> float:
    env = {**os.environ, "SEQLANG_CACHE_DIR": cache, "PYTHONPATH": ROOT}
    start = time.perf_counter()
    run = subprocess.run([sys.executable, "-m", "seqlang", "check", path], env=env, capture_output=True, text=True)
    elapsed = time.perf_counter() - start
    if run.returncode != 0:
        raise SystemExit(run.stderr)
    return elapsed


_IN_PROCESS = r"""
import sys, time
import seqlang
from seqlang.compile.geometry import check_geometry
sequence = seqlang.load(sys.argv[1])
start = time.perf_counter()
check_geometry(sequence.program, sequence.timeline)
print(time.perf_counter() - start, 'arc' in sys.modules)
"""


def geometry_only(cache: str) -> tuple[float, bool]:
    """Seconds spent in the geometry and pair checks of a warm run, and whether ARC got imported."""
    env = {**os.environ, "SEQLANG_CACHE_DIR": cache, "PYTHONPATH": ROOT}
    run = subprocess.run([sys.executable, "-c", _IN_PROCESS, DEMO], env=env, capture_output=True, text=True)
    seconds, imported = run.stdout.split()
    return float(seconds), imported == "True"


def main() -> None:
    with tempfile.TemporaryDirectory() as cache:
        cold = timed_check(DEMO, cache)
        warm = min(timed_check(DEMO, cache) for _ in range(3))
        baseline = min(timed_check(BASELINE, cache) for _ in range(3))
        pair_checks, imported = geometry_only(cache)
    print(f"warm pair checks in process: {pair_checks * 1e3:.0f} ms; ARC imported: {imported}")
    print(f"forster_gate.seq check: cold {cold:.2f} s, warm {warm:.2f} s (best of 3; target < 0.5 s)")
    print(f"baseline rabi_ramsey.seq check: {baseline:.2f} s; warm/baseline = {warm / baseline:.2f}")


if __name__ == "__main__":
    main()
