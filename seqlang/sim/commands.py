"""`seqlang simulate`: register the command and print its results."""
from __future__ import annotations

import json
import math
import sys

from ..lang.diagnostics import render, sort_diagnostics

# The simulator's engine and noise-source names, written out so that registering the
# command (every `seqlang` start, `--help` included) does not import numpy and scipy;
# tests/test_front_end.py checks that they match seqlang.sim.api.ENGINES and
# seqlang.sim.noise.SOURCES.
ENGINES = ("auto", "fast", "trajectories", "lindblad", "qutip")
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
    p.add_argument("--load-shots", type=_count, default=1000, metavar="N",
                   help="for traps that load with a probability: loading statistics over N seeded draws "
                        "(default 1000; the first is the simulated shot)")
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
    p.add_argument("--shots", type=_count, default=200,
                   help="Monte Carlo shots for sampled noise or trajectories (default 200; 1e4 is accepted)")
    p.add_argument("--seed", type=int, default=1, help="random seed (default 1); recorded in the output")
    p.add_argument("--engine", choices=ENGINES, default="auto",
                   help="auto (default: fast unless dissipation returns into the qubit space; then lindblad for "
                        "small clusters, trajectories for large ones with pure dephasing), fast, trajectories, "
                        "lindblad, or qutip (the reference path)")
    p.add_argument("--no-truncation", dest="truncate", action="store_false",
                   help="keep doubly excited states of strongly blockaded pairs")


def _count(text: str) -> int:
    """A whole number of shots, written 2000 or 2e3."""
    import argparse
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if not value.is_integer():
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}")
    return int(value)


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
    from .limits import SimulationLimit
    try:
        result = simulate(sequence, ladder=args.ladder, noise=sources, shots=args.shots, seed=args.seed,
                          engine=args.engine, truncate=args.truncate, repetitions=args.sample, progress=True,
                          shared_noise=args.shared_noise)
    except SimulationLimit as exc:
        print(f"seqlang: {args.file}: {exc}", file=sys.stderr)
        return 1
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    for diagnostic in sort_diagnostics(result.warnings):
        print(render(diagnostic), file=sys.stderr)
    document = as_document(result, load_shots=args.load_shots)
    print(json.dumps(document, indent=1, allow_nan=False) if args.json else summary(document))
    return 0


def _check_counts(args) -> None:
    from ..cli import UsageError
    if args.shots < 1:
        raise UsageError("--shots must be at least 1")
    if getattr(args, "sample", None) is not None and args.sample < 1:
        raise UsageError("--sample must be at least 1")


def as_document(result, load_shots: int = 1000) -> dict:
    """The JSON form: expectations, records, final level populations, interactions (and, for an
    array that loads stochastically, the occupancy, the fill plans and the loading statistics)."""
    from .api import record_errors
    from .model import LEVELS
    from .observables import clean
    sites, errors = {}, {}
    for cluster in result.clusters:
        for name, row in zip(cluster.model.sites, cluster.populations()):
            sites[name] = {level: clean(p) for level, p in zip(LEVELS, row)}
        if cluster.sampled and cluster.shots > 1:
            spread = cluster.shot_populations().std(axis=0, ddof=1) / cluster.shots ** 0.5
            for name, row in zip(cluster.model.sites, spread):
                errors[name] = {level: clean(p) for level, p in zip(LEVELS, row)}
    extra = {"site_populations_error": errors, "records_error": record_errors(result.clusters)} if errors else {}
    return {
        "program": result.program_name,
        "expectations": list(result.expectations),
        "records": result.records,
        "site_populations": sites,
        **extra,
        "interactions_hz": {f"{a}-{b}": clean(v) for (a, b), v in sorted(result.interactions_hz.items())},
        "interactions": {f"{a}-{b}": _pair_entries(m, result.pair_tracks.get((a, b), ()))
                         for (a, b), m in sorted(result.pair_models.items())},
        "clusters": [list(c.model.sites) for c in result.clusters],
        "latency_remainder_ns": {port: clean(r * 1e9) for port, r in sorted(result.latency_remainders_s.items())},
        "noise": result.noise,
        "engine": result.engine,
        "reduction": result.reduction,
        "note": "model prediction for the played (tick-quantized) timeline; not a guarantee of the apparatus",
        "array_summary": _array_summary(result, sites),
        **_arrays(result, load_shots),
    }


def _arrays(result, shots: int) -> dict:
    program = result.program
    if program is None or program.arrays is None:
        return {}
    from ..arrays.loading import statistics
    from ..emit.arrays import array_document
    state = program.arrays
    document = array_document(state)
    document["statistics"] = statistics(program, state.occupancy.seed, shots, state.traps, state.plans) \
        if state.occupancy.given is None else None
    return {"arrays": document}


def _pair_entries(first, later) -> dict:
    """A pair's model at its first Rydberg pulse and, under `later`, from each later change of
    geometry on (through and after a move, at a field edge), with the time it starts."""
    from .observables import clean
    entry = pair_entry(first)
    if later:
        entry["later"] = [{"from_s": clean(t), **pair_entry(shift)} for t, shift in later]
    return entry


def pair_entry(shift) -> dict:
    """One pair's model in the JSON: which model, its shift, overlap and nearest channel defect."""
    from .observables import clean

    def num(x):
        return clean(x) if math.isfinite(x) else None
    return {"model": shift.model, "shift_hz": num(shift.shift_hz), "overlap": num(shift.overlap),
            "channel_defect_hz": num(shift.defect_hz), "distance_um": num(shift.distance_m * 1e6),
            "theta_deg": num(math.degrees(shift.theta_rad)), "field_v_m": num(shift.field_v_m),
            "crossover_radius_um": num(shift.crossover_radius_m * 1e6),
            "le_roy_radius_um": num(shift.le_roy_radius_m * 1e6)}


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
             + (f"; {noise['shots']} shots, seed {noise['seed']}" if "shots" in noise else "; exact (no sampling)")
             + f"; engine {document.get('engine', 'qutip')}"]
    reduction = document.get("reduction") or {}
    if reduction.get("truncated_pairs"):
        lines.append(f"blockade truncation: |rr> dropped for {len(reduction['truncated_pairs'])} pair(s), "
                     f"neglected population <= {reduction['neglected_bound']:.2g}")
    if noise.get("interrupted"):
        lines.append(f"interrupted: {noise['interrupted']}; the numbers use the finished shots")
    for note in noise.get("notes", []):
        lines.append(f"note: {note}")
    lines += _array_lines(document.get("arrays"))
    for e in document["expectations"]:
        lines += _expectation_lines(e, noise)
    if many and document.get("array_summary"):
        lines.append(f"\narray of {len(document['site_populations'])} sites, final level populations "
                     "(mean ± spread over sites; per site in --json):")
        lines += array_lines(document["array_summary"])
        return "\n".join(lines)
    lines.append("\nfinal level populations per site:")
    populations = list(document["site_populations"].items())
    for site, pops in populations[:MAX_LISTED]:
        lines.append(f"  {site}: " + "  ".join(f"|{k}> {v:.5f}" for k, v in pops.items()))
    if len(populations) > MAX_LISTED:
        lines.append(f"  ... {len(populations) - MAX_LISTED} more sites (all in --json)")
    for record, sites in document["records"].items():
        shown = list(sites.items())
        lines.append(f"record {record}: P(bright) " + ", ".join(f"{s} {p:.5f}" for s, p in shown[:MAX_LISTED])
                     + (f", ... {len(shown) - MAX_LISTED} more" if len(shown) > MAX_LISTED else ""))
    return "\n".join(lines)


def _array_lines(arrays: dict | None) -> list[str]:
    """Occupancy, fills and loading statistics: the simulated atoms are the loaded ones."""
    if not arrays:
        return []
    occ = arrays["occupancy"]
    where = f"given by {occ['given']}" if "given" in occ else f"drawn with load seed {occ['load_seed']}"
    lines = [f"atoms of this shot (occupancy {where}; results over the loaded atoms only): " + ", ".join(
        f"{sp} {v['loaded']} of {v['traps']} traps" for sp, v in arrays["loading"].items())]
    for fill in arrays["fills"]:
        lines.append(f"fill {fill['species']}: {fill['targets']} targets, {fill['carried']} carried in "
                     f"{fill['duration_us'] / 1e3:.4g} ms; expected filling {fill['expected_filling']:.4f}")
    stats = arrays.get("statistics")
    if stats:
        lines.append(f"loading over {stats['shots']} draws (seed {stats['seed']}): " + ", ".join(
            f"{sp} {v['mean_loaded']:.2f} ± {v['std_loaded']:.2f} (binomial {v['binomial_mean']:.2f} ± "
            f"{v['binomial_std']:.2f})" for sp, v in stats["species"].items()))
        for fill in stats["fills"]:
            lines.append(f"  enough {fill['species']} atoms for the fill in {fill['enough_atoms']:.1%} of draws")
    return lines + [""]


MAX_LISTED = 12  # clusters and sites listed one by one on the terminal (all of them in --json)
TOP_OUTCOMES = 8  # population tables longer than this show their largest entries on the terminal


def _pm(e: dict, key: str, fmt: str = ".2g") -> str:
    return f" ± {e[key]:{fmt}}" if key in e else ""


def _expectation_lines(e: dict, noise: dict) -> list[str]:
    phase = f" (phase {e['phase_rad']:.4g} rad)" if "phase_rad" in e else ""
    lines = [f"\nexpect {', '.join(e['sites'])} as {e['state']}{phase}: fidelity {e['fidelity']:.6f}"
             + _pm(e, "fidelity_error") + (" (Monte Carlo)" if "fidelity_error" in e else "")]
    pops, errs = e["populations"], e.get("populations_error", {})
    shown = list(pops.items())
    if len(shown) > TOP_OUTCOMES:
        shown = sorted(shown, key=lambda kv: -kv[1])[:TOP_OUTCOMES]
    text = "  ".join(f"{k}: {v:.5f}" + (f"±{errs[k]:.1g}" if k in errs else "") for k, v in shown)
    more = len(pops) - len(shown)
    lines.append(("  top outcomes " if more else "  populations ") + text
                 + (f"   (+{more} more, {sum(v for _, v in shown):.5f} shown; all in --json)" if more else ""))
    if "sampled_counts" in e:
        lines.append(f"  sampled {noise.get('repetitions')} repetitions (seed {noise.get('seed')}): "
                     + "  ".join(f"{k}: {v}" for k, v in list(e["sampled_counts"].items())[:TOP_OUTCOMES + 1])
                     + ("" if len(e["sampled_counts"]) <= TOP_OUTCOMES + 1 else "  ..."))
    lines.append(f"  residual Rydberg {e['residual_rydberg']:.3g}{_pm(e, 'residual_rydberg_error', '.1g')}   "
                 f"lost {e['loss']:.3g}{_pm(e, 'loss_error', '.1g')}")
    if "ghz" in e:
        g, ge = e["ghz"], e.get("ghz_error", {})
        lines.append(f"  GHZ: P(0..0) {g['p_all_zero']:.5f}  P(1..1) {g['p_all_one']:.5f}  parity coherence C "
                     f"{g['coherence']:.5f}{_pm(ge, 'coherence')}  F = (P0+P1)/2 + C/2 = {g['parity_fidelity']:.5f}"
                     f"{_pm(ge, 'parity_fidelity')}")
    c, ce = e.get("correlators", {}), e.get("correlators_error", {})
    if len(e["sites"]) == 2 and all(a + b in c for a in "XYZ" for b in "XYZ"):
        for a in "XYZ":
            lines.append("  " + "  ".join(f"<{a}{b}> {c[a + b]:+.4f}" + _pm(ce, a + b, ".1g") for b in "XYZ"))
    others = [k for k in c if len(k) != 2 or len(e["sites"]) != 2]
    if others:
        lines.append("  " + "  ".join(f"<{k}> {c[k]:+.4f}" + _pm(ce, k, ".1g") for k in others))
    if "feed_forward" in e:
        lines += feed_forward_lines(e["feed_forward"])
    for cond in e["conditioned"]:
        lines.append(f"  given {cond['record']}[{cond['site']}] = {cond['outcome']} "
                     f"(p = {cond['probability']:.4f}{_pm(cond, 'probability_error', '.1g')}): "
                     f"fidelity {cond['fidelity']:.6f}{_pm(cond, 'fidelity_error')}")
    return lines


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
    from .limits import SimulationLimit
    try:
        numbers = budget(sequence, shots=args.shots, seed=args.seed, engine=args.engine, truncate=args.truncate)
    except SimulationLimit as exc:
        print(f"seqlang: {args.file}: {exc}", file=sys.stderr)
        return 1
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    print(json.dumps(numbers, indent=1, allow_nan=False) if args.json else budget_table(numbers))
    if args.output:
        plot_budget(numbers, args.output, what_if=args.what_if)
        if not args.json:
            print(f"wrote {args.output}")
    return 0
