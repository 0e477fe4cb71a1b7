"""Simulation timings, side by side in one run (not a test).

Run:  python benchmarks/bench_sim.py            # everything
      python benchmarks/bench_sim.py --arrays   # the array-scale cases only
Reports: a two-atom two-pulse CZ, a 4-atom blockade sequence, one Bell pair and
ten distant Bell pairs (clusters: target ≤ 12× one pair), with peak RSS.
Interactions are fixed numbers there (no atomic-data lookups are timed).

Array scale (issue goals; the atomic-data lookups *are* timed, on a warm disk cache):
the 221-site two-species array of 110 Bell pairs 60 µm apart plus one spare atom,
every noise source of the demo rig, 200 shots (goal < 2 s); 1000 far-apart sites
(100 µm grid), every noise source, 200 shots (goal < 10 s). Both print wall and CPU
time, the clusters and how many distinct clusters were simulated.
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


MILLPOND = os.path.join(os.path.dirname(os.path.abspath(__file__)), "programs", "noisy.rig")
BELL_BODY = """sequence arr {
  together {
    pulse mw_na area pi/2 phase -90 deg
    pulse mw_cs area pi/2 phase -90 deg
  }
  pulse ryd_cs on helpers area pi
  pulse ryd_na area 2pi
  pulse ryd_cs on helpers area pi
  pulse mw_na area pi/2 phase 90 deg
}
expect d0, h0 as psi_plus
expect d0, d1 as |00>
"""


def bell_array(directory: str, pairs: int = 110, spare: int = 1) -> str:
    """`pairs` Na–Cs Bell pairs (4 µm) on a grid 60 µm apart, and `spare` lone atoms: 221 sites."""
    lines = ['use "noisy.rig"']
    for k in range(pairs):
        x, y = 60 * (k % 11), 60 * (k // 11)
        lines += [f"site d{k} = na at ({x}, {y}) um", f"site h{k} = cs at ({x + 4}, {y}) um"]
    lines += [f"site s{k} = na at ({-60 * (k + 1)}, -60) um" for k in range(spare)]
    lines.append("group helpers = " + ", ".join(f"h{k}" for k in range(pairs)))
    return _write_array(directory, "array221", lines + [BELL_BODY])


def far_array(directory: str, count: int = 1000) -> str:
    """`count` single atoms of both species on a 100 µm grid: every atom its own cluster."""
    lines = ['use "noisy.rig"'] + [f"site a{k} = {'na' if k % 2 else 'cs'} at ({100 * (k % 32)}, "
                                   f"{100 * (k // 32)}) um" for k in range(count)]
    lines.append("sequence far {\n  together {\n    pulse mw_na area pi/2\n    pulse mw_cs area pi/2\n  }\n"
                 "  pulse ryd_na area pi\n  pulse ryd_cs on " + ", ".join(f"a{k}" for k in range(0, count, 2))
                 + " area pi\n}\nexpect a0, a1 as |00>\n")
    return _write_array(directory, f"far{count}", lines)


def _write_array(directory: str, name: str, lines: list[str]) -> str:
    import shutil
    shutil.copy(MILLPOND, os.path.join(directory, "noisy.rig"))
    path = os.path.join(directory, f"{name}.seq")
    with open(path, "w") as handle:
        handle.write("\n".join(lines) + "\n")
    return path


def array_case(path: str, label: str, goal: float) -> None:
    sequence = seqlang.load(path)
    seqlang.simulate(sequence, noise="off")  # warm the atomic-data cache and imports
    wall, cpu = time.perf_counter(), time.process_time()
    result = seqlang.simulate(sequence, noise="all", shots=200)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    distinct = len({c.representative for c in result.clusters})
    print(f"{label}: {wall:6.2f} s wall, {cpu:6.2f} s CPU (goal < {goal:g} s); {len(result.clusters)} clusters, "
          f"{distinct} simulated; engine {result.engine}; F = {result.expectations[0]['fidelity']:.4f}"
          f" ± {result.expectations[0].get('fidelity_error', 0):.1e}")


def main() -> int:
    if "--arrays" in sys.argv[1:]:
        with tempfile.TemporaryDirectory() as directory:
            array_case(bell_array(directory), "221-site array, all noise, 200 shots ", 2)
            array_case(far_array(directory), "1000 far-apart sites, all noise, 200 shots", 10)
        return 0
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
