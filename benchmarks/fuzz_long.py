"""The long fuzz run: ≥ 50,000 seeded mutants of every program in the repository.

    PYTHONPATH=. python benchmarks/fuzz_long.py [--cases 50000] [--seed 1] [--save DIR]

Same machinery and outcome classes as tests/test_fuzz.py (see tests/fuzzing.py):
each case through the entry point of `seqlang check`, under a per-case time bound.
Prints the outcome counts, every distinct failure place with one input that
reaches it, and the throughput; exits 1 when a case crashed, hung or printed a
malformed message outside the known classes. `--save DIR` writes the inputs of
every failure there for reproduction. Last figures: benchmarks/RESULTS.md.
"""
from __future__ import annotations

import argparse
import collections
import os
import random
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
import fuzzing  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=50_000)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--time-bound", type=float, default=10.0, help="seconds per case")
    parser.add_argument("--save", type=Path, default=None, help="folder for failing inputs")
    args = parser.parse_args(argv)

    rng = random.Random(args.seed)
    counts: collections.Counter[str] = collections.Counter()
    places: dict[tuple[str, str], tuple[int, str]] = {}
    slowest = (0.0, "")
    with tempfile.TemporaryDirectory(prefix="seqlang-fuzz-") as scratch:
        # Mutated Rydberg levels must not fill the user's atomic-data cache.
        os.environ["SEQLANG_CACHE_DIR"] = str(Path(scratch) / "atomic-cache")
        tree = fuzzing.scratch_tree(Path(scratch) / "corpus")
        fuzzing.prewarm(tree)  # the corpus' own atomic data, outside the per-case bound
        started = time.perf_counter()
        for number in range(args.cases):
            case = fuzzing.make_case(rng, tree, number)
            began = time.perf_counter()
            outcome = fuzzing.run_case(case, args.time_bound)
            slowest = max(slowest, (time.perf_counter() - began, case.origin))
            counts[outcome.kind] += 1
            if outcome.kind not in ("ok", "diagnosed"):
                key = (outcome.kind, outcome.detail.split(":")[0][:100])
                seen, example = places.get(key, (0, case.text))
                places[key] = (seen + 1, example)
                if args.save and not outcome.kind.startswith("known:"):
                    args.save.mkdir(parents=True, exist_ok=True)
                    (args.save / f"case{number}.txt").write_text(case.text, encoding="utf-8", newline="")
            if (number + 1) % 2500 == 0:
                print(f"  {number + 1:,} cases, {time.perf_counter() - started:.0f} s: "
                      f"{dict(sorted(counts.items()))}", file=sys.stderr, flush=True)
    elapsed = time.perf_counter() - started
    _print_summary(args, counts, places, elapsed, slowest)
    failures = sum(n for kind, n in counts.items() if kind not in ("ok", "diagnosed") and not kind.startswith("known:"))
    return 1 if failures else 0


def _print_summary(args, counts, places, elapsed: float, slowest) -> None:
    print(f"seed {args.seed}: {args.cases:,} cases in {elapsed:.0f} s ({args.cases / elapsed:.0f} cases/s); "
          f"slowest case {slowest[0]:.2f} s (from {slowest[1]})")
    print("| outcome | cases | share |")
    print("|---|---|---|")
    for kind, n in sorted(counts.items(), key=lambda kv: -kv[1]):
        print(f"| {kind} | {n:,} | {n / args.cases:.2%} |")
    if places:
        print("\ndistinct places outside ok/diagnosed (count, kind, where, one input):")
        for (kind, where), (n, example) in sorted(places.items(), key=lambda kv: -kv[1][0]):
            print(f"  {n:6,}  {kind:<24} {where}  {example[:160]!r}")


if __name__ == "__main__":
    sys.exit(main())
