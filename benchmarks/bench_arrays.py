"""Arrays at scale: layout generation and checks, the rearrangement plan, memory.

Run:  python benchmarks/bench_arrays.py [--quick]

1. Layout + check: a square lattice of N sites (every trap loaded) with one global
   microwave pulse, through `check` (parse, resolve, lattice generation, occupancy
   stage, lowering, geometry and timing checks, hardware plan). Target: 1,000 sites
   under 1 s. N is doubled to show how time and memory grow.
2. Plan: a `fill` of a block of T target sites from a half-loaded lattice, the
   occupancy stage alone (assignment, order, corridor paths, moves) on the resolved
   program. Target: 500 atoms under 1 s.
3. The whole `check` of that fill (every move also goes through the geometry checks).

Times are wall-clock of the step alone in this process, memory the peak of Python
allocations (tracemalloc) during it. Prints figures; not a test.
"""
from __future__ import annotations

import os
import shutil
import sys
import tempfile
import time
import tracemalloc

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

from seqlang.arrays.loading import Occupancy  # noqa: E402
from seqlang.arrays.stage import occupy  # noqa: E402
from seqlang.compile.pipeline import check  # noqa: E402
from seqlang.program.resolve import resolve  # noqa: E402

RIG = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "programs", "heronry.rig")


def _measure(step):
    tracemalloc.start()
    start = time.perf_counter()
    value = step()
    elapsed = time.perf_counter() - start
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return value, elapsed, peak / 2**20


def _write(folder: str, text: str, loading: bool) -> str:
    rig = open(RIG, encoding="utf-8").read()
    if not loading:
        rig = rig.replace("loading 55 %", "loading 100 %").replace("loading 60 %", "loading 100 %")
    with open(os.path.join(folder, "heronry.rig"), "w", encoding="utf-8") as handle:
        handle.write(rig)
    path = os.path.join(folder, "bench.seq")
    with open(path, "w", encoding="utf-8") as handle:
        handle.write('use "heronry.rig"\n' + text)
    return path


def layouts(folder: str, sides) -> None:
    print("layout + check (square lattice, every trap loaded, one global pulse)")
    print(f"{'sites':>7} {'check s':>9} {'peak MiB':>9} {'s per 1000 sites':>17}")
    for side in sides:
        path = _write(folder, f"lattice d = square {{ pitch 5 um  size ({side}, {side})  species na }}\n"
                              "sequence s { pulse mw_na area pi }\n", loading=False)
        checked, seconds, peak = _measure(lambda: check(path))
        n = len(checked.program.sites)
        print(f"{n:>7} {seconds:>9.3f} {peak:>9.1f} {seconds / n * 1000:>17.3f}")


def fill(folder: str, targets: int, full_check: bool) -> None:
    side = 2 * int(targets ** 0.5 + 1)  # a quarter of the lattice is the block; half of the traps load
    block = int(targets ** 0.5)
    text = (f"lattice d = square {{ pitch 4.5 um  size ({side}, {side})  species cs }}\n"
            f"group block = d[0 .. {block - 1}, 0 .. {targets // block - 1}]\n"
            "sequence s {\n  fill block\n}\n")
    path = _write(folder, text.replace("species cs", "species cs"), loading=True)
    program, _ = resolve(path)
    planned, seconds, peak = _measure(lambda: occupy(program, Occupancy(seed=1)))
    plan = planned.arrays.plans[0]
    print(f"fill: {len(program.sites)} traps, {len(planned.arrays.loaded)} loaded, {len(plan.targets)} targets, "
          f"{len(plan.carries)} carried ({sum(len(c.legs) for c in plan.carries)} moves): "
          f"plan {seconds:.3f} s, peak {peak:.1f} MiB")
    if full_check:
        _, seconds, peak = _measure(lambda: check(path))
        print(f"      whole check of that fill (geometry checks of every move): {seconds:.3f} s, peak {peak:.1f} MiB")


def main() -> None:
    quick = "--quick" in sys.argv
    folder = tempfile.mkdtemp(prefix="bench_arrays_")
    try:
        # Warm-up: the first check builds (or reads) the parse tables and imports numpy/scipy.
        _, seconds, _ = _measure(lambda: (layouts(folder, (4,)), __import__("scipy.optimize")))
        print(f"(warm-up, imports and parse tables: {seconds:.2f} s)\n")
        layouts(folder, (16, 23, 32) if quick else (16, 23, 32, 45, 64))
        for targets in ((100,) if quick else (100, 250, 500)):
            fill(folder, targets, full_check=True)
    finally:
        shutil.rmtree(folder)


if __name__ == "__main__":
    main()
