"""`seqlang scan`: register the command; `seqlang plot DIR` draws a scan's store."""
from __future__ import annotations

import os
import sys


def register(sub) -> None:
    from ..sim.commands import ENGINES, SOURCES  # written-out lists: start-up without numpy
    p = sub.add_parser("scan", help="compile (and simulate) every point of a scan into DIR: tables, "
                                    "points.csv, results.zarr")
    p.add_argument("file", help="a sequence file (*.seq) with `scan` declarations")
    p.add_argument("-o", "--output", required=True, metavar="DIR", help="directory for the scan's outputs")
    p.add_argument("--simulate", action="store_true", help="simulate every point into DIR/results.zarr")
    p.add_argument("--noise", default="off", metavar="off|all|SOURCE,...",
                   help="noise sources: off (default), all, or a comma list of " + ", ".join(SOURCES))
    p.add_argument("--shots", type=int, default=200, help="Monte Carlo shots per point (default 200)")
    p.add_argument("--seed", type=int, default=1,
                   help="run seed (default 1); each point's seed is derived from it and the point index")
    p.add_argument("--engine", choices=ENGINES, default="auto", help="simulation engine (default auto)")
    p.add_argument("--no-truncation", dest="truncate", action="store_false",
                   help="keep doubly excited states of strongly blockaded pairs")
    p.add_argument("--repetitions", type=int, metavar="N",
                   help="error bars of probabilities for N runs of the experiment (default: --shots)")
    p.add_argument("--workers", type=int, metavar="N", help="parallel workers (default: every core; 1 = serial)")
    p.add_argument("--scheduler", metavar="ADDRESS|local",
                   help="run the points on a Dask cluster at ADDRESS, or on a new local one")
    p.add_argument("--resume", action="store_true", help="complete an interrupted scan: compute only missing points")
    p.add_argument("--only", metavar="K,K,...", help="run only these point indices (e.g. to re-run one alone)")
    p.add_argument("--no-progress", dest="progress", action="store_false", default=None,
                   help="no progress bar")
    p.set_defaults(run=cmd_scan)


def _indices(text: str | None) -> list[int] | None:
    from ..cli import UsageError
    if text is None:
        return None
    try:
        return [int(part) for part in text.split(",") if part.strip()]
    except ValueError:
        raise UsageError(f"--only takes point indices such as 3,7,12, not {text!r}") from None


def cmd_scan(args) -> int:
    from ..cli import UsageError, _existing, _print_warnings
    from .run import ScanUsageError, run_scan
    if args.workers is not None and args.workers < 1:
        raise UsageError("--workers must be at least 1")
    if args.repetitions is not None and args.repetitions < 1:
        raise UsageError("--repetitions must be at least 1")
    _existing(args.file)
    options = dict(on_checked=lambda checked: _print_warnings(checked.warnings),simulate=args.simulate, noise=args.noise, shots=args.shots, seed=args.seed,
                   engine=args.engine, truncate=args.truncate, repetitions=args.repetitions,
                   workers=args.workers, scheduler=args.scheduler, resume=args.resume,
                   only=_indices(args.only), progress=args.progress)
    try:
        dataset = run_scan(args.file, args.output, **options)
    except (ScanUsageError, ValueError) as exc:
        raise UsageError(str(exc)) from None
    except KeyboardInterrupt:
        print(f"\nseqlang: interrupted; {_stored(args.output)} stored in {args.output}; "
              "run the same command with --resume to compute the rest", file=sys.stderr)
        return 130
    done = int(dataset["point_done"].sum())
    shape = " x ".join(f"{dim} {size}" for dim, size in dataset.sizes.items()) or "one point"
    print(f"{args.file}: {done} of {int(dataset['point_done'].size)} points stored ({shape})")
    for name in ("tables", "points.csv", "results.zarr"):
        print(f"wrote {os.path.join(args.output, name)}")
    print("CAUTION: review these tables before they drive lasers, RF or electrodes; "
          "see the README's cautions.")
    return 0


def _stored(output: str) -> str:
    from . import store
    try:
        mask = store.done_mask(os.path.join(output, store.STORE))
    except Exception:
        return "no points"
    return f"{int(mask.sum())} of {mask.size} points"


def cmd_plot_scan(args) -> int:
    """`seqlang plot DIR`: one figure per reported number of the scan in DIR."""
    from ..cli import UsageError
    from ..plot.scans import plot_store
    from . import store
    path = os.path.join(args.file, store.STORE)
    if not os.path.isdir(path):
        raise UsageError(f"{args.file} holds no scan results ({store.STORE}); run `seqlang scan --simulate` first")
    output = args.output or os.path.join(args.file, "plots")
    for written in plot_store(store.open_dataset(path), output):
        print(f"wrote {written}")
    return 0
