"""The `seqlang` command line.

Exit codes: 0 ok, 1 the program has errors (or an output could not be written),
2 the command was used wrongly, 70 an internal error (a bug in seqlang), 130
interrupted.
"""
from __future__ import annotations

import argparse
import os
import sys

from . import __version__
from .lang.diagnostics import SeqlangError, render, render_all, sort_diagnostics

EXIT_OK, EXIT_ERRORS, EXIT_USAGE = 0, 1, 2
EXIT_INTERNAL = 70
MAX_PAIR_TABLE_SITES = 24  # `show` lists every pair up to this many sites  # EX_SOFTWARE of the BSD sysexits convention


class UsageError(Exception):
    """The command was used wrongly (missing file, bad option)."""


def _existing(path: str) -> str:
    if not os.path.isfile(path):
        raise UsageError(f"no such file: {path}")
    return path


def _print_warnings(warnings) -> None:
    for diagnostic in sort_diagnostics(warnings):
        print(render(diagnostic), file=sys.stderr)


def _load(path: str):
    from .api import load
    sequence = load(_existing(path))
    _print_warnings(sequence.warnings)
    return sequence


def cmd_check(args) -> int:
    """Check every file named; the exit code is 1 if any of them has errors."""
    failed = 0
    for path in args.files:
        try:
            _check_one(path)
        except SeqlangError as exc:
            if len(args.files) == 1:
                raise
            _print_errors(exc)
            failed += 1
    if failed and len(args.files) > 1:
        print(f"{failed} of {len(args.files)} files have errors", file=sys.stderr)
    return EXIT_ERRORS if failed else EXIT_OK


def _check_one(path: str) -> None:
    try:
        sequence = _load(path)
    except SeqlangError:
        if not _declares_scans(path):
            raise
        sequence = None  # some point fails: check_points names it
    if sequence is not None and sequence.program.scans is None:
        print(f"{path}: ok ({_counts(sequence.timeline, sequence.program, len(sequence.warnings))})")
        return
    from .scan.check import check_points
    scan = check_points(path)  # every point of the scan
    _print_warnings(scan.warnings)
    first = scan.first
    points = f"; {scan.count} scan point{'s' if scan.count != 1 else ''} checked" if scan.space else ""
    print(f"{path}: ok ({_counts(first.timeline, first.program, len(scan.warnings))}{points})")


def _counts(timeline, program, warnings: int) -> str:
    """"31 events, 2 sites, 0 warnings"; for an array whose traps load by chance the sites are
    the loaded ones, and it says so."""
    def counted(n: int, word: str) -> str:
        return f"{n} {word}{'' if n == 1 else 's'}"
    sites = counted(len(program.sites), "site")
    if program.arrays is not None:
        state = program.arrays
        sites += f" (loaded of {len(state.traps)} traps, {state.occupancy.describe()})"
    return f"{counted(len(timeline.events), 'event')}, {sites}, {counted(warnings, 'warning')}"


def _declares_scans(path: str) -> bool:
    from .lang import syntax as ast
    from .program.resolve import load_files
    try:
        return any(isinstance(i, ast.ScanDecl) for i in load_files(path).main.items)
    except SeqlangError:
        return False


def _load_point(path: str, point: int | None):
    """A file with scans is compiled one point at a time (`seqlang scan` compiles them all)."""
    from .api import load
    from .program.resolve import load_files
    from .program.scans import resolve_scans
    space = resolve_scans(load_files(_existing(path)).main, [])
    if space is None and point is not None:
        raise UsageError(f"{path} declares no scan, so it has no --point")
    if space is not None and point is None:
        raise UsageError(f"{path} scans {', '.join(a.name for a in space.axes)}: compile one point with "
                         f"--point K (0..{space.count - 1}), or all of them with `seqlang scan`")
    if space is not None and not 0 <= point < space.count:
        raise UsageError(f"--point {point} is outside the scan's points 0..{space.count - 1}")
    sequence = load(path, point=point)
    _print_warnings(sequence.warnings)
    return sequence


def cmd_compile(args) -> int:
    from .show import compile_summary
    sequence = _load_point(args.file, args.point)
    paths = sequence.write_tables(args.output)
    print(compile_summary(sequence.checked))
    for path in paths:
        print(f"wrote {path}")
    print("CAUTION: review these tables before they drive lasers, RF or electrodes; "
          "see the README's cautions.")
    return EXIT_OK


def cmd_show(args) -> int:
    from .show import compile_summary, pair_models_table, pair_table, timeline_table
    sequence = _load(args.file)
    print(timeline_table(sequence.checked))
    print()
    print(compile_summary(sequence.checked))
    from .show import decision_summary
    if decision_summary(sequence.checked):
        print("\n" + decision_summary(sequence.checked))
    from .sim.crosstalk import summary as crosstalk_summary
    crosstalk = crosstalk_summary(sequence.program, sequence.played)
    if crosstalk:
        print("\nimaging crosstalk (far-detuned scattering, Grimm et al. 2000):\n" + "\n".join(crosstalk))
    from .arrays.summary import layout_lines, occupancy_lines
    arrays = layout_lines(sequence.program) + occupancy_lines(sequence.program)
    if arrays:
        print("\narrays (docs/arrays.md):\n" + "\n".join(arrays))
    if not args.no_pairs and len(sequence.program.sites) > MAX_PAIR_TABLE_SITES:
        print(f"\nRydberg pairs: {len(sequence.program.sites)} sites; the table of every pair is printed for "
              f"at most {MAX_PAIR_TABLE_SITES} (the pair models used follow)")
        models = pair_models_table(sequence.program, sequence.played)
        if models:
            print("\nPair models used from the first Rydberg pulse on (seqlang.atoms.pairs):")
            print(models)
    elif not args.no_pairs and len(sequence.program.sites) > 1:
        table = pair_table(sequence.program)
        if table:
            print("\nRydberg pairs (van der Waals, C6 from the alkali Rydberg calculator):")
            print(table)
        models = pair_models_table(sequence.program, sequence.played)
        if models:
            print("\nPair models used from the first Rydberg pulse on (seqlang.atoms.pairs):")
            print(models)
    return EXIT_OK


def cmd_plot(args) -> int:
    if os.path.isdir(args.file):
        from .scan.commands import cmd_plot_scan
        return cmd_plot_scan(args)
    if not args.output:
        raise UsageError("plot needs -o FILE for a sequence file")
    _check_figure_name(args.output)
    sequence = _load(args.file)
    if args.what == "timeline":
        from .plot.timeline import plot_timeline
        plot_timeline(sequence.checked, args.output, piecewise=not args.linear_time)
    elif args.what == "array":
        from .plot.array import plot_array
        try:
            plot_array(sequence, args.output, args.record)
        except ValueError as exc:
            raise UsageError(str(exc)) from None
    else:
        from .plot.results import plot_results
        plot_results(sequence, args.what, args.output, piecewise=not args.linear_time,
                     **_plot_simulation_options(args))
    print(f"wrote {args.output}")
    return EXIT_OK


def _plot_simulation_options(args) -> dict:
    """simulate() options from `plot`'s flags; error bars stand for --shots repetitions."""
    from .sim.noise import parse_sources
    try:
        sources = parse_sources(args.noise)
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    if args.shots < 1:
        raise UsageError("--shots must be at least 1")
    return {"noise": sources, "shots": args.shots, "seed": args.seed, "repetitions": args.shots}


def _check_figure_name(path: str) -> None:
    """Refuse an unknown figure extension before any work is done."""
    from .plot.formats import FormatError, figure_format
    try:
        figure_format(path)
    except FormatError as exc:
        raise UsageError(str(exc)) from None


def _add_file(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("file", help="a sequence file (*.seq)")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="seqlang",
        description="Check, compile and simulate pulse sequences for two-species neutral-atom arrays.",
        epilog="Exit codes: 0 ok, 1 the program has errors or an output could not be written, "
               "2 the command was used wrongly, 70 an internal error (a bug in seqlang).")
    parser.add_argument("--version", action="version", version=f"seqlang {__version__}")
    parser.add_argument("--rig-dir", action="append", default=[], metavar="DIR",
                        help="a further directory that `use` and `import` may read from (repeatable; "
                             "also $SEQLANG_RIG_PATH)")
    parser.add_argument("--load-seed", type=int, default=1, metavar="N",
                        help="seed of the drawn occupancy of traps that load with a probability (default 1; "
                             "docs/arrays.md)")
    parser.add_argument("--occupancy", metavar="FILE",
                        help="the loaded traps of this shot, one site name per line, instead of a draw")
    sub = parser.add_subparsers(dest="command", metavar="command")
    sub.required = True

    p = sub.add_parser("check", help="report every problem of one or more sequence files (no output files)")
    p.add_argument("files", nargs="+", metavar="file", help="sequence files (*.seq)")
    p.set_defaults(run=cmd_check)

    p = sub.add_parser("compile", help="write timing.csv, timing.json and waveforms.npz")
    _add_file(p)
    p.add_argument("-o", "--output", required=True, metavar="DIR", help="directory for the tables")
    p.add_argument("--point", type=int, metavar="K", help="for a file with scans: compile scan point K")
    p.set_defaults(run=cmd_compile)

    p = sub.add_parser("show", help="print the played timeline, the compile report and the Rydberg pairs")
    _add_file(p)
    p.add_argument("--no-pairs", action="store_true", help="skip the pair interactions (no atomic data needed)")
    p.set_defaults(run=cmd_show)

    p = sub.add_parser("plot", help="draw the timeline, or simulated populations or correlators; "
                                    "or, given a scan's DIR, its results")
    p.add_argument("file", help="a sequence file (*.seq), or a directory written by `seqlang scan`")
    p.add_argument("-o", "--output", metavar="FILE",
                   help="image file to write; its extension names the format (.png, .svg or .pdf); "
                        "for a scan's DIR: a directory (default DIR/plots)")
    p.add_argument("--what", choices=("timeline", "populations", "correlators", "array"), default="timeline",
                   help="what to draw (default: timeline); `array`: the site map shaded by P(bright)")
    p.add_argument("--record", metavar="NAME", help="with --what array: the record whose P(bright) shades the map")
    p.add_argument("--linear-time", action="store_true",
                   help="a plain linear time axis (default: long stretches compressed so short pulses show)")
    p.add_argument("--noise", default="off", metavar="off|all|SOURCE,...",
                   help="noise sources for populations/correlators (default off; see `simulate --help`)")
    p.add_argument("--shots", type=int, default=200,
                   help="Monte Carlo shots, and the repetitions N behind the error bars (default 200)")
    p.add_argument("--seed", type=int, default=1, help="random seed (default 1); shown on the figure")
    p.set_defaults(run=cmd_plot)

    _add_optional_commands(sub)
    return parser


def _add_optional_commands(sub) -> None:
    """Commands whose modules register themselves (simulation, editor support)."""
    import importlib
    for module in ("seqlang.sim.commands", "seqlang.editor.commands", "seqlang.report.commands",
                   "seqlang.scan.commands", "seqlang.fit.commands"):
        try:
            importlib.import_module(module).register(sub)
        except ModuleNotFoundError as exc:
            if not module.startswith(exc.name or "?"):
                raise


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    _add_rig_dirs(args.rig_dir)
    try:
        _set_occupancy(args)
        return args.run(args)
    except SeqlangError as exc:
        _print_errors(exc)
        return EXIT_ERRORS
    except UsageError as exc:
        print(f"seqlang: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("seqlang: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # The reader went away (`seqlang show … | head`): stop quietly, not with a traceback.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK
    except Exception as exc:  # noqa: BLE001 - the last net: a bug, told apart from user errors
        from .emit.atomic import OutputError
        if isinstance(exc, OutputError):
            print(f"seqlang: {exc}", file=sys.stderr)
            return EXIT_ERRORS
        return _internal_error(exc)


def _print_errors(exc: SeqlangError) -> None:
    print(render_all(exc.diagnostics), file=sys.stderr)
    errors = sum(d.is_error for d in exc.diagnostics)
    print(f"{errors} error{'s' if errors != 1 else ''}", file=sys.stderr)


def _set_occupancy(args) -> None:
    """`--load-seed` / `--occupancy`: which traps loaded, for every command of this run."""
    from .arrays.loading import Occupancy
    from .arrays.stage import OCCUPANCY
    if args.occupancy is None:
        OCCUPANCY.set(Occupancy(seed=args.load_seed))
        return
    try:
        with open(args.occupancy, encoding="utf-8") as handle:
            text = handle.read()
    except (OSError, UnicodeDecodeError) as exc:
        raise UsageError(f"cannot read the occupancy {args.occupancy}: {exc}") from None
    names = frozenset(n for n in (line.split("#", 1)[0].strip() for line in text.splitlines()) if n)
    OCCUPANCY.set(Occupancy(seed=args.load_seed, given=names, source=args.occupancy, text=text))


def _add_rig_dirs(dirs: list[str]) -> None:
    """`--rig-dir` extends $SEQLANG_RIG_PATH, which the resolver (and scan workers) read."""
    if dirs:
        known = [p for p in os.environ.get("SEQLANG_RIG_PATH", "").split(os.pathsep) if p]
        os.environ["SEQLANG_RIG_PATH"] = os.pathsep.join(known + [os.path.abspath(d) for d in dirs])


def _internal_error(exc: Exception) -> int:
    print(f"seqlang: internal error: {type(exc).__name__}: {str(exc)[:500]}", file=sys.stderr)
    print(f"This is a bug in seqlang {__version__}, not in your program; please report it with the "
          "input that caused it (set SEQLANG_TRACEBACK=1 to see where it happened).", file=sys.stderr)
    if os.environ.get("SEQLANG_TRACEBACK"):
        import traceback
        traceback.print_exception(exc)
    return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
