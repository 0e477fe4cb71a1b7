"""`seqlang budget`: which noise source costs the most fidelity.

For every expected state: the infidelity with all sources, with none, and with
each source alone (same seed and shots for every run, so the comparison is fair).
"""
from __future__ import annotations

from .api import simulate
from .noise import SOURCES


def budget(sequence, shots: int = 200, seed: int = 1, **options) -> dict:
    """Infidelities per expectation: {"none", "all", and each source} plus settings."""
    runs = {"none": (), "all": SOURCES, **{s: (s,) for s in SOURCES}}
    results = {name: simulate(sequence, noise=sources, shots=shots, seed=seed, **options)
               for name, sources in runs.items()}
    expectations = []
    for k, e in enumerate(results["none"].expectations):
        entry = {"sites": e["sites"], "state": e["state"], "infidelity": {}, "error": {}}
        for name, result in results.items():
            x = result.expectations[k]
            entry["infidelity"][name] = round(1 - x["fidelity"], 12)
            entry["error"][name] = x.get("fidelity_error")  # None: an exact number, no error bar
        expectations.append(entry)
    engines = sorted({r.engine for r in results.values()})
    from .declared import not_declared
    return {"program": sequence.program.name, "shots": shots, "seed": seed, "engines": engines,
            "expectations": expectations, "not_declared": not_declared(sequence)}


def budget_table(numbers: dict) -> str:
    lines = [f"error budget of {numbers['program']} ({numbers['shots']} shots for sampled noise, "
             f"seed {numbers['seed']}; engine {', '.join(numbers.get('engines', []))})"]
    for e in numbers["expectations"]:
        lines.append(f"\n{', '.join(e['sites'])} as {e['state']}:")
        ordered = sorted(e["infidelity"].items(), key=lambda kv: -kv[1])
        for name, value in ordered:
            if name in numbers.get("not_declared", {}):
                lines.append(f"  {name + ' alone':<28} not declared ({numbers['not_declared'][name]})")
                continue
            error = f" ± {e['error'][name]:.2g}" if e["error"][name] is not None else ""
            label = {"none": "no noise (gate error only)", "all": "all sources"}.get(name, name + " alone")
            lines.append(f"  {label:<28} infidelity {value:.3e}{error}")
    return "\n".join(lines)


def plot_budget(numbers: dict, path: str, what_if: bool = False) -> None:
    """The budget chart (see :func:`seqlang.plot.budget.budget_figure`) as a PNG."""
    from ..plot.budget import budget_figure
    from ..plot.save import save_png
    save_png(budget_figure(numbers, what_if=what_if), path)
