"""The `seqlang` command line. Exit codes: 0 ok, 1 the program has errors, 2 misuse."""
from __future__ import annotations

import argparse
import os
import sys

from . import __version__
from .lang.diagnostics import SeqlangError, render, render_all, sort_diagnostics

EXIT_OK, EXIT_ERRORS, EXIT_USAGE = 0, 1, 2


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
    sequence = _load(args.file)
    counts = (len(sequence.timeline.events), len(sequence.program.sites), len(sequence.warnings))
    words = ", ".join(f"{n} {w}{'' if n == 1 else 's'}" for n, w in zip(counts, ("event", "site", "warning")))
    print(f"{args.file}: ok ({words})")
    return EXIT_OK


def cmd_compile(args) -> int:
    from .show import compile_summary
    sequence = _load(args.file)
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
    if not args.no_pairs and len(sequence.program.sites) > 1:
        table = pair_table(sequence.program)
        if table:
            print("\nRydberg pairs (van der Waals, C6 from the alkali Rydberg calculator):")
            print(table)
        models = pair_models_table(sequence.program, sequence.played)
        if models:
            print("\nPair models used at the Rydberg pulses (seqlang.atoms.pairs):")
            print(models)
    return EXIT_OK


def cmd_plot(args) -> int:
    sequence = _load(args.file)
    if args.what == "timeline":
        from .plot.timeline import plot_timeline
        plot_timeline(sequence.checked, args.output)
    else:
        from .plot.results import plot_results
        plot_results(sequence, args.what, args.output)
    print(f"wrote {args.output}")
    return EXIT_OK


def _add_file(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("file", help="a sequence file (*.seq)")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="seqlang",
        description="Check, compile and simulate pulse sequences for two-species neutral-atom arrays.",
        epilog="Exit codes: 0 ok, 1 the program has errors, 2 the command was used wrongly.")
    parser.add_argument("--version", action="version", version=f"seqlang {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="command")
    sub.required = True

    p = sub.add_parser("check", help="report every problem of a sequence file (no output files)")
    _add_file(p)
    p.set_defaults(run=cmd_check)

    p = sub.add_parser("compile", help="write timing.csv, timing.json and waveforms.npz")
    _add_file(p)
    p.add_argument("-o", "--output", required=True, metavar="DIR", help="directory for the tables")
    p.set_defaults(run=cmd_compile)

    p = sub.add_parser("show", help="print the played timeline, the compile report and the Rydberg pairs")
    _add_file(p)
    p.add_argument("--no-pairs", action="store_true", help="skip the pair interactions (no atomic data needed)")
    p.set_defaults(run=cmd_show)

    p = sub.add_parser("plot", help="draw the timeline, or simulated populations or correlators")
    _add_file(p)
    p.add_argument("-o", "--output", required=True, metavar="PNG", help="image file to write")
    p.add_argument("--what", choices=("timeline", "populations", "correlators"), default="timeline",
                   help="what to draw (default: timeline)")
    p.set_defaults(run=cmd_plot)

    _add_optional_commands(sub)
    return parser


def _add_optional_commands(sub) -> None:
    """Commands whose modules register themselves (simulation, editor support)."""
    import importlib
    for module in ("seqlang.sim.commands", "seqlang.editor.commands"):
        try:
            importlib.import_module(module).register(sub)
        except ModuleNotFoundError as exc:
            if not module.startswith(exc.name or "?"):
                raise


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.run(args)
    except SeqlangError as exc:
        print(render_all(exc.diagnostics), file=sys.stderr)
        errors = sum(d.is_error for d in exc.diagnostics)
        print(f"{errors} error{'s' if errors != 1 else ''}", file=sys.stderr)
        return EXIT_ERRORS
    except UsageError as exc:
        print(f"seqlang: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("seqlang: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # The reader (e.g. `| head`) went away; nothing more to say.
        sys.stderr.close()
        return EXIT_OK
    except BrokenPipeError:
        # The reader went away (`seqlang show … | head`): stop quietly, not with a traceback.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
