"""`seqlang simulate`: register the command and print its results."""
from __future__ import annotations

import json
import sys

from ..lang.diagnostics import render, sort_diagnostics

# The simulator's engine and noise-source names, written out so that registering the
# command (every `seqlang` start, `--help` included) does not import numpy and scipy;
# tests/test_front_end.py checks that they match seqlang.sim.api.ENGINES and
# seqlang.sim.noise.SOURCES.
ENGINES = ("auto", "fast", "lindblad", "qutip")
SOURCES = ("decay", "dephasing", "scattering", "laser_noise", "intensity", "doppler", "motion",
           "detuning_error", "t2_star", "field_noise", "preparation", "imaging", "crosstalk")


def register(sub) -> None:
    p = sub.add_parser("simulate", help="simulate the played timeline: fidelities, correlators, populations")
    p.add_argument("file", help="a sequence file (*.seq)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of the summary")
    p.add_argument("--ladder", action="store_true",
                   help="keep the intermediate state of Rydberg drives explicit (needs the legs' Rabi frequencies)")
    _noise_options(p)
    p.add_argument("--unshared-noise", dest="shared_noise", action="store_false",
                   help="draw the field and beam noise per cluster instead of once per shot for the array")
    p.add_argument("--sample", type=int, metavar="N",
                   help="error bars for N repetitions of the experiment, and a sampled histogram of N outcomes")
    p.set_defaults(run=cmd_simulate)

    b = sub.add_parser("budget", help="infidelity of each expected state with all noise, none, and each source alone")
    b.add_argument("file", help="a sequence file (*.seq)")
    b.add_argument("--json", action="store_true", help="print one JSON object instead of the table")
    b.add_argument("-o", "--output", metavar="PNG", help="also draw the budget as a bar chart")
    b.add_argument("--what-if", action="store_true",
                   help="add a panel: the all-sources infidelity with each source halved (first-order estimate)")
    _run_options(b)
    b.set_defaults(run=cmd_budget)


def _noise_options(p) -> None:
    p.add_argument("--noise", default="off", metavar="off|all|SOURCE,...",
                   help="noise sources: off (default), all, or a comma list of " + ", ".join(SOURCES))
    _run_options(p)


def _run_options(p) -> None:
    p.add_argument("--shots", type=int, default=200, help="Monte Carlo shots for sampled noise (default 200)")
    p.add_argument("--seed", type=int, default=1, help="random seed (default 1); recorded in the output")
    p.add_argument("--engine", choices=ENGINES, default="auto",
                   help="auto (default: fast unless dissipation returns into the qubit space), fast, lindblad, "
                        "or qutip (the reference path)")
    p.add_argument("--no-truncation", dest="truncate", action="store_false",
                   help="keep doubly excited states of strongly blockaded pairs")


def cmd_simulate(args) -> int:
    from ..cli import _load
    from .api import simulate
    from ..cli import UsageError
    from .noise import parse_sources
    try:
        sources = parse_sources(args.noise)
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    _check_counts(args)
    sequence = _load(args.file)
    try:
        result = simulate(sequence, ladder=args.ladder, noise=sources, shots=args.shots, seed=args.seed,
                          engine=args.engine, truncate=args.truncate, repetitions=args.sample, progress=True,
                          shared_noise=args.shared_noise)
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    for diagnostic in sort_diagnostics(result.warnings):
        print(render(diagnostic), file=sys.stderr)
    document = as_document(result)
    print(json.dumps(document, indent=1) if args.json else summary(document))
    return 0


def _check_counts(args) -> None:
    from ..cli import UsageError
    if args.shots < 1:
        raise UsageError("--shots must be at least 1")
    if getattr(args, "sample", None) is not None and args.sample < 1:
        raise UsageError("--sample must be at least 1")


def as_document(result) -> dict:
    """The JSON form: expectations, records, final level populations, interactions."""
    from .model import LEVELS
    from .observables import clean
    sites = {}
    for cluster in result.clusters:
        for name, row in zip(cluster.model.sites, cluster.populations()):
            sites[name] = {level: clean(p) for level, p in zip(LEVELS, row)}
    return {
        "program": result.program_name,
        "expectations": list(result.expectations),
        "records": result.records,
        "site_populations": sites,
        "interactions_hz": {f"{a}-{b}": clean(v) for (a, b), v in sorted(result.interactions_hz.items())},
        "clusters": [list(c.model.sites) for c in result.clusters],
        "noise": result.noise,
        "engine": result.engine,
        "reduction": result.reduction,
        "note": "model prediction for the played (tick-quantized) timeline; not a guarantee of the apparatus",
        "array_summary": _array_summary(result, sites),
    }


def _array_summary(result, sites: dict) -> dict:
    from .array import summarize
    return summarize(result.program, sites, result.records) if getattr(result, "program", None) else {}


def summary(document: dict) -> str:
    from .array import MANY_SITES, cluster_line, lines as array_lines
    noise = document.get("noise", {})
    many = len(document["site_populations"]) > MANY_SITES
    clusters = cluster_line(document["clusters"]) if many else \
        "clusters: " + ", ".join("{" + ",".join(c) + "}" for c in document["clusters"])
    lines = [f"simulated {document['program']} (" + clusters + "); noise: "
             + (", ".join(noise.get("sources", [])) or "off")
             + (f"; {noise['shots']} shots, seed {noise['seed']}" if noise.get("shots", 1) > 1 else "")
             + f"; engine {document.get('engine', 'qutip')}"]
    reduction = document.get("reduction") or {}
    if reduction.get("truncated_pairs"):
        lines.append(f"blockade truncation: |rr> dropped for {len(reduction['truncated_pairs'])} pair(s), "
                     f"neglected population <= {reduction['neglected_bound']:.2g}")
    if noise.get("interrupted"):
        lines.append(f"interrupted: {noise['interrupted']}; the numbers use the finished shots")
    for e in document["expectations"]:
        error = f" ± {e['fidelity_error']:.2g} (Monte Carlo)" if "fidelity_error" in e else ""
        lines.append(f"\nexpect {', '.join(e['sites'])} as {e['state']}: fidelity {e['fidelity']:.6f}{error}")
        lines.append("  populations " + "  ".join(f"{k}: {v:.5f}" for k, v in e["populations"].items()))
        if "sampled_counts" in e:
            lines.append(f"  sampled {noise.get('repetitions')} repetitions (seed {noise.get('seed')}): "
                         + "  ".join(f"{k}: {v}" for k, v in e["sampled_counts"].items())
                         + "   binomial error " + "  ".join(f"{v:.3f}" for v in e["populations_error"].values()))
        lines.append(f"  residual Rydberg {e['residual_rydberg']:.3g}   lost {e['loss']:.3g}")
        if "correlators" in e:
            c = e["correlators"]
            for a in "XYZ":
                lines.append("  " + "  ".join(f"<{a}{b}> {c[a + b]:+.4f}" for b in "XYZ"))
        if "feed_forward" in e:
            lines += feed_forward_lines(e["feed_forward"])
        for cond in e["conditioned"]:
            lines.append(f"  given {cond['record']}[{cond['site']}] = {cond['outcome']} "
                         f"(p = {cond['probability']:.4f}): fidelity {cond['fidelity']:.6f}")
    if many and document.get("array_summary"):
        lines.append(f"\narray of {len(document['site_populations'])} sites, final level populations "
                     "(mean ± spread over sites; per site in --json):")
        lines += array_lines(document["array_summary"])
        return "\n".join(lines)
    lines.append("\nfinal level populations per site:")
    for site, pops in document["site_populations"].items():
        lines.append(f"  {site}: " + "  ".join(f"|{k}> {v:.5f}" for k, v in pops.items()))
    for record, sites in document["records"].items():
        lines.append(f"record {record}: P(bright) " + ", ".join(f"{s} {p:.5f}" for s, p in sites.items()))
    return "\n".join(lines)


def feed_forward_lines(ff: dict) -> list[str]:
    """The fidelity with and without feed-forward, and how often each key occurred."""
    lines = [f"  feed-forward: fidelity {ff['with']['fidelity']:.6f} with, {ff['without']['fidelity']:.6f} without"]
    for table in ff["keys"]:
        label = f"{table['record']}[{', '.join(table['sites'])}]"
        lines.append(f"    keys of {label} ({table['key_kind'].replace('_', ' ')}; without feed-forward key "
                     f"{table['fixed_key_without']} is played): "
                     + "  ".join(f"{row['key']}: p {row['probability']:.3f}"
                                 + (f" F {row['fidelity']:.4f}" if "fidelity" in row else "")
                                 for row in table["keys"]))
    return lines


__all__ = ["register", "as_document", "summary", "feed_forward_lines"]


def cmd_budget(args) -> int:
    from ..cli import UsageError, _load
    from .budget import budget, budget_table, plot_budget
    _check_counts(args)
    if args.output:
        from ..cli import _check_figure_name
        _check_figure_name(args.output)
    sequence = _load(args.file)
    try:
        numbers = budget(sequence, shots=args.shots, seed=args.seed, engine=args.engine, truncate=args.truncate)
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    print(json.dumps(numbers, indent=1) if args.json else budget_table(numbers))
    if args.output:
        plot_budget(numbers, args.output, what_if=args.what_if)
        if not args.json:
            print(f"wrote {args.output}")
    return 0
