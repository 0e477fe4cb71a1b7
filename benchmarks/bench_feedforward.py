"""Feed-forward simulation time: helper-assisted phase correction, 8 helpers + 8 data atoms.

Run:  python benchmarks/bench_feedforward.py [--shots N]

The program is programs/phase_correction.seq grown to 8 caesium helpers and 8
sodium data atoms (the invented Millpond lab), simulated with every noise
source for 2000 shots. The baseline is the same sequence without feed-forward:
the data's final pulse at the fixed phase 180 deg, simulated the usual way.
Targets (issue 11): under 5 s, and at most 1.5x the baseline. Checking and
compiling are done once before timing; atomic data is not needed (no Rydberg
pulses). Not a test: it prints figures.
"""
from __future__ import annotations

import argparse
import os
import shutil
import tempfile
import time

import seqlang

HERE = os.path.dirname(os.path.abspath(__file__))
PROGRAMS = os.path.join(HERE, "..", "programs")
COUNT = 8


def program(feed_forward: bool) -> str:
    sites = [f"site h{i} = cs at (0, {20 * i}) um" for i in range(COUNT)]
    sites += [f"site d{i} = na at (20, {20 * i}) um" for i in range(COUNT)]
    phase = "180 deg - sens_na / sens_cs * phi_cs" if feed_forward else "180 deg"
    return "\n".join([
        'use "millpond.rig"', 'import "lib/trains.seq"', *sites,
        "group helpers = " + ", ".join(f"h{i}" for i in range(COUNT)),
        "sequence bench {",
        "  together {", "    pulse mw_na area pi/2", "    pulse mw_cs area pi/2", "  }",
        "  wait 200 us",
        "  pulse mw_cs area pi/2 phase -90 deg",
        "  together {", "    image cs -> mid", "    do train_on(drv = mw_na, count = 4, gap = 1.42 ms)", "  }",
        "  let phi_cs = asin(clip(2 * fraction(mid[helpers]) - 1, -1, 1))",
        f"  pulse mw_na area pi/2 phase {phase}",
        "}",
        *[f"expect d{i} as |0>" for i in range(COUNT)],
    ]) + "\n"


def timed(path: str, shots: int) -> tuple[float, float, dict]:
    """(wall time, CPU time of this process, first expectation): on a shared machine the CPU time
    is the fairer figure."""
    sequence = seqlang.load(path)
    start, cpu = time.perf_counter(), time.process_time()
    result = seqlang.simulate(sequence, noise="all", shots=shots, seed=1)
    return time.perf_counter() - start, time.process_time() - cpu, result.expectations[0]


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--shots", type=int, default=2000)
    args = parser.parse_args()
    work = tempfile.mkdtemp()
    try:
        shutil.copy(os.path.join(PROGRAMS, "millpond.rig"), work)
        shutil.copytree(os.path.join(PROGRAMS, "lib"), os.path.join(work, "lib"))
        paths = {}
        for name, ff in (("with", True), ("without", False)):
            paths[name] = os.path.join(work, f"{name}.seq")
            with open(paths[name], "w", encoding="utf-8") as handle:
                handle.write(program(ff))
        timed(paths["with"], 20)  # warm-up: imports, lark tables, caches
        t_ff, c_ff, e_ff = timed(paths["with"], args.shots)
        t_base, c_base, e_base = timed(paths["without"], args.shots)
    finally:
        shutil.rmtree(work)
    ff = e_ff["feed_forward"]
    print(f"{COUNT} helpers + {COUNT} data atoms, {args.shots} shots, noise all")
    print(f"  with feed-forward (with and without the correction): {t_ff:.2f} s wall, {c_ff:.2f} s CPU "
          "(target < 5 s)")
    print(f"  baseline, no feed-forward in the program:             {t_base:.2f} s wall, {c_base:.2f} s CPU")
    print(f"  ratio {t_ff / t_base:.2f}x wall, {c_ff / c_base:.2f}x CPU (target <= 1.5x)")
    print(f"  d0 fidelity: {ff['with']['fidelity']:.4f} with, {ff['without']['fidelity']:.4f} without; "
          f"baseline program {e_base['fidelity']:.4f}")


if __name__ == "__main__":
    main()
