"""Words and numbers about a program's arrays, for `show` and the tests.

Nearest neighbours come from a k-d tree (scipy.spatial.cKDTree), so a layout of
10⁵ sites is summarised in well under a second.
"""
from __future__ import annotations

import numpy as np

from ..program.model import Layout, Program

_WAYS = {"corridors": "along the corridors between rows and columns", "straight": "on straight paths"}
_TOLERANCE = 1e-6  # relative: neighbours at the nearest distance within this


def neighbours(positions: np.ndarray) -> tuple[float, np.ndarray]:
    """(nearest-neighbour distance, how many neighbours at that distance each site has)."""
    from scipy.spatial import cKDTree
    if len(positions) < 2:
        return 0.0, np.zeros(len(positions), dtype=int)
    tree = cKDTree(positions)
    distance = float(tree.query(positions, k=2)[0][:, 1].min())
    counts = tree.query_ball_point(positions, distance * (1 + _TOLERANCE), return_length=True) - 1
    return distance, np.asarray(counts)


def layout_positions(program: Program, layout: Layout, traps=None) -> np.ndarray:
    sites = traps or program.sites
    return np.array([sites[n].position_m for n in layout.sites], dtype=float).reshape(-1, 3)


def layout_lines(program: Program) -> list[str]:
    """One line per lattice: kind, size, sites per species, nearest neighbours."""
    traps = program.arrays.traps if program.arrays is not None else program.sites
    lines = []
    for layout in program.layouts.values():
        positions = layout_positions(program, layout, traps)
        distance, counts = neighbours(positions)
        kinds = {}
        for n in layout.sites:
            kinds[traps[n].species] = kinds.get(traps[n].species, 0) + 1
        per = ", ".join(f"{k} {v}" for k, v in sorted(kinds.items()))
        size = " x ".join(map(str, layout.size))
        lines.append(f"lattice {layout.name}: {layout.kind} {size}, {len(layout.sites)} sites ({per}); "
                     f"nearest neighbours {distance * 1e6:.4g} um, up to {int(counts.max(initial=0))} per site")
    return lines


def occupancy_lines(program: Program) -> list[str]:
    """The loaded traps per species and each fill's plan."""
    state = program.arrays
    if state is None:
        return []
    lines = [f"occupancy {state.occupancy.describe()}: " + ", ".join(
        f"{sp} {state.loaded_count(sp)} of {sum(s.species == sp for s in state.traps.values())} traps loaded "
        f"(p = {state.probabilities[sp]:.3g})" for sp in sorted({s.species for s in state.traps.values()}))]
    for plan in state.plans:
        lines.append(f"fill {plan.species}: {len(plan.targets)} target sites, {len(plan.kept)} already full, "
                     f"{len(plan.carries)} atoms carried one at a time ({_WAYS[plan.strategy]}) "
                     f"({sum(len(c.legs) for c in plan.carries)} moves, {plan.duration_s * 1e3:.4g} ms), "
                     f"{len(plan.spare)} spare; expected filling {plan.expected_filling:.4f}")
    return lines
