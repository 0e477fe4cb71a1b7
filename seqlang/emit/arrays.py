"""The array of one shot in the outputs: occupancy, loading and the rearrangement plan.

`array_document` goes into timing.json (``arrays``) and the simulation JSON;
`rearrangement_csv` is the plan as a table, one row per leg, in play order. Both
are deterministic for a given occupancy (and a drawn occupancy for a given seed).
"""
from __future__ import annotations

import csv
import io

REARRANGEMENT_COLUMNS = ("carry", "species", "atom_from", "site_to", "leg", "x0_um", "y0_um", "x1_um", "y1_um",
                         "duration_us", "path_um", "survival")


def _r(x: float, digits: int = 6) -> float:
    return float(round(x, digits)) + 0.0


def array_document(state) -> dict:
    """Occupancy (seed or file), loaded traps per species, and each fill's plan and totals."""
    occupancy = state.occupancy
    source = {"given": occupancy.source} if occupancy.given is not None else {"load_seed": occupancy.seed}
    species = sorted({s.species for s in state.traps.values()})
    loaded = {sp: {"traps": sum(s.species == sp for s in state.traps.values()),
                   "loaded": state.loaded_count(sp), "probability": _r(state.probabilities[sp])}
              for sp in species}
    return {"occupancy": source, "loading": loaded, "loaded_sites": list(state.loaded),
            "fills": [_plan_entry(p) for p in state.plans]}


def _plan_entry(plan) -> dict:
    return {"species": plan.species, "targets": len(plan.targets), "kept": len(plan.kept),
            "carried": len(plan.carries), "spare": len(plan.spare),
            "duration_us": _r(plan.duration_s * 1e6, 3), "expected_filling": _r(plan.expected_filling),
            "carries": [{"from": c.source, "to": c.target, "legs": len(c.legs), "path_um": _r(c.length_m * 1e6, 4),
                         "survival": _r(c.survival)} for c in plan.carries]}


def rearrangement_csv(state) -> str:
    """One row per leg of every carry, in the order they play."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(REARRANGEMENT_COLUMNS)
    k = 0
    for plan in state.plans:
        for carry in plan.carries:
            for n, (a, b, duration) in enumerate(carry.legs):
                writer.writerow([k, plan.species, carry.source, carry.target, n,
                                 *(f"{_r(v * 1e6, 4):g}" for v in (a[0], a[1], b[0], b[1])),
                                 f"{_r(duration * 1e6, 3):g}", f"{_r(carry.length_m * 1e6, 4):g}",
                                 f"{_r(carry.survival):g}"])
            k += 1
    return out.getvalue()
