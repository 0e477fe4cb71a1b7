"""Simulation timings, side by side in one run (not a test).

Run:  python benchmarks/bench_sim.py
Reports: a two-atom two-pulse CZ, a 4-atom blockade sequence, one Bell pair and
ten distant Bell pairs (clusters: target ≤ 12× one pair), with peak RSS.
Interactions are fixed numbers (no atomic-data lookups are timed).
"""
from __future__ import annotations

import math
import os
import resource
import sys
import tempfile
import time

import seqlang

RIG = """
rig benchbench {
  tick 1 ns
  species a = Cs133 { rydberg 62S1/2 }
  species b = Rb87 { rydberg 70S1/2 }
  drive mw_a microwave a { rabi 2.5 MHz  port awg0.1 }
  drive mw_b microwave b { rabi 2.5 MHz  port awg0.2 }
  drive ryd_a rydberg a { rabi 5 MHz  reach each  port awg1.1 }
  drive ryd_b rydberg b { rabi 5 MHz  reach each  port awg1.2 }
}
"""


def _write(directory: str, name: str, sites: list[str], body: str) -> str:
    with open(os.path.join(directory, "bench.rig"), "w") as handle:
        handle.write(RIG)
    path = os.path.join(directory, f"{name}.seq")
    with open(path, "w") as handle:
        handle.write('use "bench.rig"\n' + "\n".join(sites) + f"\nsequence {name} {{\n{body}\n}}\n")
    return path


def cz_program(directory: str) -> tuple[str, dict]:
    rabi = 4.29268 / (2 * math.pi * 500e-9)
    pulse = f"pulse ryd_a duration 500 ns rabi {rabi} Hz detuning {0.377371 * rabi} Hz"
    body = f"pulse mw_a area pi/2\n{pulse}\n{pulse} phase -3.90242 rad"
    return _write(directory, "cz", ["site p = a at (0, 0) um", "site q = a at (3, 0) um"], body), {("p", "q"): 5e8}


def four_atom_program(directory: str) -> tuple[str, dict]:
    names = ["s0", "s1", "s2", "s3"]
    sites = [f"site {n} = a at ({3 * i}, 0) um" for i, n in enumerate(names)]
    body = "pulse mw_a area pi\npulse ryd_a area pi/2\npulse ryd_a area pi/2 phase 1 rad"
    v = {(a, b): 5e8 / abs(i - j) ** 6 for i, a in enumerate(names) for j, b in enumerate(names) if i < j}
    return _write(directory, "four", sites, body), v


def pairs_program(directory: str, count: int) -> tuple[str, dict]:
    sites, v = [], {}
    for k in range(count):
        sites += [f"site c{k} = a at ({200 * k}, 0) um", f"site t{k} = b at ({200 * k + 4}, 0) um"]
        v[(f"c{k}", f"t{k}")] = 2e8
    body = ("together {\n pulse mw_a area pi/2 phase -90 deg\n pulse mw_b area pi/2 phase -90 deg\n}\n"
            "pulse ryd_a area pi\npulse ryd_b area 2pi\npulse ryd_a area pi\npulse mw_b area pi/2 phase 90 deg")
    return _write(directory, f"pairs{count}", sites, body), v


def timed(path: str, interactions: dict, repeats: int = 3) -> float:
    sequence = seqlang.load(path)
    seqlang.simulate(sequence, interactions_hz=interactions)
    start = time.perf_counter()
    for _ in range(repeats):
        seqlang.simulate(sequence, interactions_hz=interactions)
    return (time.perf_counter() - start) / repeats


def main() -> int:
    with tempfile.TemporaryDirectory() as directory:
        cz = timed(*cz_program(directory))
        four = timed(*four_atom_program(directory))
        one = timed(*pairs_program(directory, 1))
        ten = timed(*pairs_program(directory, 10))
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"two-atom two-pulse CZ:        {cz * 1e3:8.1f} ms   (target < 1 s)")
    print(f"four-atom blockade sequence:  {four * 1e3:8.1f} ms")
    print(f"one Bell pair:                {one * 1e3:8.1f} ms")
    print(f"ten distant Bell pairs:       {ten * 1e3:8.1f} ms   ratio {ten / one:5.2f} (target <= 12)")
    print(f"peak RSS of this run:         {rss:8.1f} MiB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
