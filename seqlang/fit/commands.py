"""`seqlang fit DIR --data measured.csv` and `seqlang calibrate FIT.json --rig RIG ...`."""
from __future__ import annotations

import json
import math
import os

MODELS = ("rabi", "ramsey", "resonance", "blockade", "sqrt_n")  # as fit.models.MODELS, without numpy
LIKELIHOODS = ("auto", "binomial", "least_squares")  # as fit.fitting.LIKELIHOODS


def register(sub) -> None:
    p = sub.add_parser("fit", help="lay measured counts beside a simulated scan (chi2), and fit a calibration curve")
    p.add_argument("directory", metavar="DIR", help="a directory written by `seqlang scan --simulate`")
    p.add_argument("--data", required=True, metavar="CSV", help="measured counts (see docs/fits.md)")
    p.add_argument("--model", choices=MODELS, help="fit this curve to each measured record")
    p.add_argument("--envelope", choices=("gaussian", "exponential"), default="gaussian",
                   help="decay of a Ramsey fringe (default gaussian)")
    p.add_argument("--likelihood", choices=LIKELIHOODS, default="auto",
                   help="binomial maximum likelihood or weighted least squares (default auto: binomial "
                        "below 50 repetitions per point)")
    p.add_argument("-o", "--output", metavar="DIR", help="where to write fit.json and the figures (default DIR/fit)")
    p.set_defaults(run=cmd_fit)

    c = sub.add_parser("calibrate", help="the rig change a fit implies, as a diff; applied only with --write")
    c.add_argument("fit", metavar="FIT_JSON", help="fit.json written by `seqlang fit`")
    c.add_argument("--rig", required=True, help="the rig file to change")
    target = c.add_mutually_exclusive_group(required=True)
    target.add_argument("--drive", help="the drive whose `rabi` (Rabi fit) or `line_offset` (resonance fit) is "
                                        "calibrated, or whose Rabi frequency gives C6 (blockade fit)")
    target.add_argument("--species", help="the species whose `t2_star` a Ramsey fit calibrates")
    c.add_argument("--record", help="which fitted record to use (default: the only one)")
    c.add_argument("--write", action="store_true", help="apply the change (atomically; the old file is kept)")
    c.set_defaults(run=cmd_calibrate)

    o = sub.add_parser("optimise", help="vary the sequence's `free` values to maximise the fidelity of its expect")
    o.add_argument("file", help="a sequence file (*.seq) with `free` declarations and an `expect`")
    o.add_argument("--noise", default="off", metavar="off|all|SOURCE,...", help="noise sources (default off)")
    o.add_argument("--shots", type=int, default=200, help="Monte Carlo shots per trial for sampled noise")
    o.add_argument("--seed", type=int, default=1, help="seed (the same for every trial: common random numbers)")
    o.add_argument("--tolerance", type=float, default=1e-8, help="stop when the simplex is this small (in units "
                                                                   "of each free range)")
    o.add_argument("--expect", default="all", metavar="all|N|SITES",
                   help="whose fidelity: all (their mean; default), the Nth expect, or the one on sites a,b")
    o.add_argument("--method", choices=("simplex", "evolution"), default="simplex",
                   help="simplex: Nelder-Mead from the start values (default); evolution: differential "
                        "evolution over the bounds, then the simplex")
    o.add_argument("--generations", type=int, default=30, metavar="N", help="evolution: at most N generations")
    o.add_argument("--population", type=int, default=8, metavar="N",
                   help="evolution: N trials per free value in each generation")
    o.add_argument("--workers", type=int, default=1, metavar="N",
                   help="trials at once on a local process pool (default 1: in this process)")
    o.add_argument("--scheduler", metavar="ADDRESS|local",
                   help="run the trials on a Dask cluster at ADDRESS, or a LocalCluster of --workers processes")
    o.add_argument("-o", "--output", metavar="FILE", help="write the optimum as a `let` block to FILE")
    o.add_argument("--no-budget", dest="budget", action="store_false", help="skip the error budget at the optimum")
    o.set_defaults(run=cmd_optimise)


def cmd_fit(args) -> int:
    from ..cli import UsageError, _existing
    from ..scan import store
    from .measured import read_measured
    path = os.path.join(args.directory, store.STORE)
    if not os.path.isdir(path):
        raise UsageError(f"{args.directory} holds no scan results; run `seqlang scan --simulate` first")
    ds = store.open_dataset(path)
    if len(ds.sizes) != 1:
        raise UsageError("`seqlang fit` compares one-parameter scans; this store has "
                         f"{len(ds.sizes)} dimensions")
    measured = read_measured(_existing(args.data))
    report = compare(ds, measured, args.model, args.envelope, args.likelihood)
    output = args.output or os.path.join(args.directory, "fit")
    os.makedirs(output, exist_ok=True)
    from ..emit.atomic import write_text
    write_text(os.path.join(output, "fit.json"), json.dumps(report["document"], indent=1, sort_keys=True, allow_nan=False) + "\n")
    from ..plot.fits import plot_overlay
    for record in report["document"]["records"]:
        written = os.path.join(output, f"{record}.png")
        plot_overlay(ds, report["x"], measured, record, report["fits"].get(record), written)
        print(f"wrote {written}")
    print(summary(report["document"]))
    print(f"wrote {os.path.join(output, 'fit.json')}")
    return 0


def compare(ds, measured, model: str | None, envelope: str = "gaussian", likelihood: str = "auto") -> dict:
    """χ² of the measured counts against the simulated scan, and the fits of `model`."""
    import numpy as np
    from ..lang.diagnostics import SeqlangError, Span, error
    from ..lang import units
    from .fitting import binomial_sigma, fit_counts
    dim = next(iter(ds.sizes))
    if dim not in measured.parameters:
        raise SeqlangError([error(f"no column for the scan's `{dim}` (e.g. `{dim} [{ds[dim].attrs.get('units')}]`)",
                                  Span(measured.path, 1, 1, 1, 2))])
    unit, values = measured.parameters[dim]
    factor = units.UNITS[unit][0] if unit else 1.0
    x = values * factor / ds[dim].attrs.get("si_factor", 1.0)  # in the store's unit
    document = {"data": measured.path, "parameter": dim, "unit": ds[dim].attrs.get("units", ""),
                "si_factor": ds[dim].attrs.get("si_factor", 1.0), "records": {}}
    fits = {}
    for record, counts in measured.counts.items():
        n = measured.repetitions
        entry = {"points": int(len(x))}
        if record in ds:
            simulated = np.interp(x, ds[dim].values, ds[record].values)
            chi2 = float(np.sum(((counts / n - simulated) / binomial_sigma(counts, n)) ** 2))
            entry.update(chi2_vs_simulation=chi2, dof=int(len(x)))
        if model:
            fit = fits[record] = fit_counts(model, x, counts, n, envelope, likelihood)
            entry["fit"] = {"model": model, "envelope": envelope if model == "ramsey" else None,
                            "likelihood": fit.likelihood, "values": fit.values,
                            "errors": {k: v if math.isfinite(v) else None for k, v in fit.errors.items()},
                            "chi2": fit.chi2, "dof": fit.dof}
        document["records"][record] = entry
    return {"document": document, "fits": fits, "x": x}


def summary(document: dict) -> str:
    lines = [f"measured {document['data']} against the simulated scan of {document['parameter']} "
             f"[{document['unit']}]"]
    for record, entry in document["records"].items():
        head = f"{record}: {entry['points']} points"
        if "chi2_vs_simulation" in entry:
            head += f", chi2 against the simulation {entry['chi2_vs_simulation']:.4g} for {entry['dof']} points"
        lines.append(head)
        fit = entry.get("fit")
        if fit:
            how = LIKELIHOOD_WORDS.get(fit.get("likelihood", "least_squares"))
            lines.append(f"  {fit['model']} fit, {how} (chi2 {fit['chi2']:.4g} for {fit['dof']} degrees of "
                         "freedom):")
            for name, value in fit["values"].items():
                error = fit["errors"].get(name)
                lines.append(f"    {name:10} {value:.6g} ± {error:.2g}" if error is not None else
                             f"    {name:10} {value:.6g} (no error: the likelihood is not curved here, e.g. "
                             "a probability at 0 or 1)")
    return "\n".join(lines)


LIKELIHOOD_WORDS = {"binomial": "binomial maximum likelihood, 1 sigma from the inverse Hessian",
                    "least_squares": "weighted least squares with binomial error bars, 1 sigma from the covariance"}


def cmd_calibrate(args) -> int:
    from ..cli import UsageError, _existing
    from .calibrate import apply, blockade_c6, proposal
    with open(_existing(args.fit), encoding="utf-8") as handle:
        try:
            document = json.load(handle)
        except json.JSONDecodeError as exc:
            raise UsageError(f"{args.fit}:{exc.lineno}:{exc.colno}: not a fit file written by `seqlang fit` "
                             f"({exc.msg})") from None
    _existing(args.rig)
    try:
        if _models(document) == {"blockade"}:
            if args.drive is None:
                raise ValueError("C6 from a blockade fit needs the drive whose Rabi frequency it was: --drive")
            print(blockade_c6(document, args.rig, args.drive, args.record))
            if args.write:
                print("(nothing to write: the rig takes C6 from the atomic data)")
            return 0
        change = proposal(document, args.rig, drive=args.drive, species=args.species, record=args.record)
    except (ValueError, KeyError, TypeError) as exc:
        raise UsageError(f"{args.fit}: {exc}" if not isinstance(exc, ValueError) else str(exc)) from None
    print(change.describe())
    print(change.diff, end="" if change.diff.endswith("\n") else "\n")
    if args.write:
        kept = apply(change)
        print(f"wrote {change.path} (the old file is kept as {kept})")
    else:
        print("(not applied: add --write to change the rig file)")
    return 0


def _models(document) -> set:
    try:
        return {e["fit"]["model"] for e in document["records"].values() if "fit" in e}
    except (KeyError, TypeError, AttributeError):
        from ..cli import UsageError
        raise UsageError("not a fit file written by `seqlang fit` (no records with fits)") from None


def cmd_optimise(args) -> int:
    from ..cli import UsageError, _existing
    from ..emit.atomic import write_text
    from ..sim.noise import parse_sources
    from .optimise import optimise, sequence_at
    for name in ("shots", "workers", "generations", "population"):
        if getattr(args, name) < 1:
            raise UsageError(f"--{name} must be at least 1")
    if not args.tolerance > 0:
        raise UsageError("--tolerance must be positive")
    try:
        sources = parse_sources(args.noise)
        best = optimise(_existing(args.file), noise=sources, shots=args.shots, seed=args.seed,
                        tolerance=args.tolerance, expect=args.expect, method=args.method, workers=args.workers,
                        scheduler=args.scheduler, generations=args.generations, population=args.population)
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    where = f"on Dask at {args.scheduler}" if args.scheduler else (
        f"on {args.workers} worker processes" if args.workers > 1 else "in this process")
    print(f"{args.file}: objective: the fidelity of {best.objective}")
    print(f"{args.file}: fidelity {best.fidelity:.8f} at the optimum (start {best.start_fidelity:.8f}; "
          f"{best.method}, {best.evaluations} simulations {where}; noise {', '.join(sources) or 'off'})")
    print(best.let_block(), end="")
    if args.output:
        write_text(args.output, best.let_block())
        print(f"wrote {args.output}")
    if args.budget:
        from ..sim.budget import budget, budget_table
        print(budget_table(budget(sequence_at(args.file, best.values), shots=args.shots, seed=args.seed)))
    return 0
