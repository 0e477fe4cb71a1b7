"""Array-scale summaries: a hundred sites read by species and group, not line by line.

Per species and per group: the mean and spread over sites of each level's final
population and of each record's P(bright), and the worst sites (largest leakage
out of the qubit, |r> plus |x>). The per-site numbers stay in the JSON.
"""
from __future__ import annotations

import numpy as np

from .observables import clean

MANY_SITES = 12  # above this the terminal shows summaries instead of one line per site
WORST = 3


def summarize(program, site_populations: dict, records: dict) -> dict:
    """{"species": {...}, "groups": {...}}: statistics over the sites of each."""
    sets = {"species": {sp: list(program.sites_of(sp)) for sp in program.rig.species if program.sites_of(sp)},
            "groups": {g: list(members) for g, members in program.groups.items()}}
    return {kind: {name: _stats(sites, site_populations, records) for name, sites in named.items()}
            for kind, named in sets.items()}


def _stats(sites: list[str], populations: dict, records: dict) -> dict:
    present = [s for s in sites if s in populations]
    levels = list(populations[present[0]]) if present else []
    out = {"sites": len(present), "levels": {}}
    for level in levels:
        values = np.array([populations[s][level] for s in present])
        out["levels"][level] = {"mean": clean(values.mean()), "spread": clean(values.std())}
    leak = {s: populations[s].get("r", 0.0) + populations[s].get("x", 0.0) for s in present}
    out["worst_sites"] = [{"site": s, "leakage": clean(v)}
                          for s, v in sorted(leak.items(), key=lambda kv: (-kv[1], kv[0]))[:WORST]]
    out["records"] = {}
    for record, per_site in records.items():
        values = np.array([per_site[s] for s in present if s in per_site])
        if len(values):
            out["records"][record] = {"mean_bright": clean(values.mean()), "spread": clean(values.std())}
    return out


def lines(summary: dict) -> list[str]:
    """The terminal form."""
    out = []
    for kind in ("species", "groups"):
        for name, stats in summary[kind].items():
            levels = "  ".join(f"|{k}> {v['mean']:.5f} ± {v['spread']:.2g}" for k, v in stats["levels"].items())
            out.append(f"  {kind[:-1] if kind == 'groups' else 'species'} {name} ({stats['sites']} sites): {levels}")
            for record, r in stats["records"].items():
                out.append(f"    record {record}: P(bright) {r['mean_bright']:.5f} ± {r['spread']:.2g}")
            worst = ", ".join(f"{w['site']} {w['leakage']:.3g}" for w in stats["worst_sites"])
            out.append(f"    worst sites (|r> + |x>): {worst}")
    return out


def cluster_line(clusters: list[list[str]]) -> str:
    """`221 clusters (200 of 1 site, 10 of 2 sites, ...)` instead of the list."""
    sizes: dict[int, int] = {}
    for c in clusters:
        sizes[len(c)] = sizes.get(len(c), 0) + 1
    parts = ", ".join(f"{n} of {k} site{'s' if k != 1 else ''}" for k, n in sorted(sizes.items()))
    return f"{len(clusters)} clusters ({parts})"
