"""`seqlang report FILE -o report.html`: register the command."""
from __future__ import annotations


def register(sub) -> None:
    p = sub.add_parser("report", help="write one self-contained HTML report: program, rig, timeline, "
                                      "prediction, budget, provenance")
    p.add_argument("file", help="a sequence file (*.seq)")
    p.add_argument("-o", "--output", required=True, metavar="HTML", help="the report file to write")
    p.add_argument("--noise", default="all", metavar="off|all|SOURCE,...",
                   help="noise sources for the prediction (default all)")
    p.add_argument("--shots", type=int, default=200,
                   help="Monte Carlo shots, and the repetitions N behind the error bars (default 200)")
    p.add_argument("--seed", type=int, default=1, help="random seed (default 1); recorded in the report")
    p.add_argument("--no-budget", action="store_true", help="skip the error budget (one simulation per source)")
    p.add_argument("--linear-time", action="store_true", help="plain linear time axes in the figures")
    p.set_defaults(run=cmd_report)


def cmd_report(args) -> int:
    from ..cli import UsageError, _load, _plot_simulation_options
    from .build import write_report
    sources = _plot_simulation_options(args)["noise"]  # the same checks of --noise and --shots as `plot`
    sequence = _load(args.file)
    try:
        write_report(sequence, args.output, noise=sources, shots=args.shots, seed=args.seed,
                     budget=not args.no_budget, piecewise=not args.linear_time)
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    print(f"wrote {args.output}")
    print("CAUTION: the report's tables drive lasers, RF or electrodes once compiled; review them before use.")
    return 0
