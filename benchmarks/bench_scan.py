"""Scan executors side by side (not a test).

Run:  python benchmarks/bench_scan.py [--points 400] [--shots 200]
A grid scan of the two-atom two-pulse CZ (benchmarks/programs/cz_pair.seq with
the detuning ratio and the phase jump scanned), 200 shots per point with decay
and intensity noise, run serially, on a process pool over two cores and on a
Dask LocalCluster (two worker processes). Each run is its own process, so its
peak RSS is the driver's alone; a pool run with a quarter of the points shows
that the driver's memory does not grow with the number of points. Targets:
pool ≥ 1.7× serial; Dask within 25 % of the pool.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)

PROGRAM = """use "bench.rig"
site a = na at (0, 0) um
site b = na at (3.0, 0) um
let omega = 1.3 MHz
let tau = 4.29268 / (2 * pi * omega)
scan ratio = 0.36 .. 0.39 points {rows}
scan jump = 3.85 rad .. 3.95 rad points {cols}
let theta = 136.4 deg
sequence cz_scan {{
  pulse raman_na area pi/2
  pulse ryd_na duration tau rabi omega detuning ratio * omega
  pulse ryd_na duration tau rabi omega detuning ratio * omega phase -jump
  pulse raman_na area pi/4 phase theta
}}
expect a, b as psi_plus
"""

RUN = """
import json, resource, sys, time
sys.path.insert(0, {root!r})
import seqlang
options = json.loads(sys.argv[1])
start = time.perf_counter()
ds = seqlang.scan(sys.argv[2], sys.argv[3], simulate=True, noise="decay,intensity", progress=False, **options)
seconds = time.perf_counter() - start
print(json.dumps({{"seconds": seconds, "points": int(ds["point_done"].sum()),
                  "rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
                  "fidelity_mean": float(ds["fidelity_a_b"].mean())}}))
"""


def _grid(points: int) -> tuple[int, int]:
    rows = max(1, int(round(math.sqrt(points))))
    return rows, max(1, points // rows)


def _program(directory: str, points: int) -> str:
    shutil.copy(os.path.join(HERE, "programs", "bench.rig"), directory)
    rows, cols = _grid(points)
    path = os.path.join(directory, f"cz_scan_{rows * cols}.seq")
    with open(path, "w") as handle:
        handle.write(PROGRAM.format(rows=rows, cols=cols))
    return path


def _run(path: str, output: str, **options) -> dict:
    env = {**os.environ, "PYTHONPATH": ROOT + os.pathsep + os.environ.get("PYTHONPATH", "")}
    done = subprocess.run([sys.executable, "-c", RUN.format(root=ROOT), json.dumps(options), path, output],
                          capture_output=True, text=True, env=env, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--points", type=int, default=400)
    parser.add_argument("--shots", type=int, default=200)
    args = parser.parse_args()
    work = tempfile.mkdtemp(prefix="seqlang-bench-scan-")
    try:
        full, quarter = _program(work, args.points), _program(work, args.points // 4)
        runs = {
            "serial": _run(full, os.path.join(work, "serial"), workers=1, shots=args.shots),
            "pool (2 workers)": _run(full, os.path.join(work, "pool"), workers=2, shots=args.shots),
            "Dask LocalCluster (2 processes)": _run(full, os.path.join(work, "dask"), scheduler="local",
                                                    workers=2, shots=args.shots),
            "pool, a quarter of the points": _run(quarter, os.path.join(work, "quarter"), workers=2,
                                                  shots=args.shots),
        }
    finally:
        shutil.rmtree(work, ignore_errors=True)
    print(f"{'run':34} {'points':>6} {'seconds':>9} {'points/s':>9} {'driver peak RSS':>16}")
    for name, r in runs.items():
        print(f"{name:34} {r['points']:6d} {r['seconds']:9.1f} {r['points'] / r['seconds']:9.2f} "
              f"{r['rss_mib']:13.0f} MiB")
    serial, pool, dask = (runs[k]["seconds"] for k in list(runs)[:3])
    quarter_rss, full_rss = runs["pool, a quarter of the points"]["rss_mib"], runs["pool (2 workers)"]["rss_mib"]
    print(f"\npool / serial speed-up: {serial / pool:.2f}x   (target >= 1.7x)")
    print(f"Dask / pool time: {dask / pool:.2f}   (target <= 1.25)")
    print(f"driver peak RSS, all points / a quarter: {full_rss / quarter_rss:.2f}   (target ~1)")
    same = len({round(r["fidelity_mean"], 12) for r in list(runs.values())[:3]}) == 1
    print(f"serial, pool and Dask stores agree (mean fidelity): {same}")


if __name__ == "__main__":
    main()
