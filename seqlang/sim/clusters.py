"""Split the array into clusters of atoms that can affect each other.

Two atoms belong together when both see Rydberg pulses and their pair shift
|V| is at least ``CLUSTER_THRESHOLD`` times the smallest Rydberg Rabi frequency
of the sequence. Below that the pair phase V·t accumulated during a gate is
under ~10⁻³ rad, so the pair is simulated as two independent parts and an
array of many distant pairs costs the sum of the pairs, not the product.
"""
from __future__ import annotations

from ..compile.timeline import PULSE, Timeline
from ..program.model import Program

CLUSTER_THRESHOLD = 1e-4


def rydberg_sites(program: Program, timeline: Timeline) -> set[str]:
    return {site for e in timeline.events if e.kind == PULSE
            and program.rig.drives[e.drive].kind == "rydberg" for site in e.targets}


def smallest_rydberg_rabi_hz(program: Program, timeline: Timeline) -> float:
    rates = [e.rabi_hz for e in timeline.events if e.kind == PULSE and program.rig.drives[e.drive].kind == "rydberg"]
    return min(rates, default=0.0)


def clusters(program: Program, timeline: Timeline, interactions_hz: dict[tuple[str, str], float]) -> list[tuple[str, ...]]:
    """Connected groups of sites (in declaration order), by the rule above."""
    excited = rydberg_sites(program, timeline)
    threshold = CLUSTER_THRESHOLD * smallest_rydberg_rabi_hz(program, timeline)
    parent = {s: s for s in program.sites}

    def root(s: str) -> str:
        while parent[s] != s:
            s = parent[s]
        return s

    for (a, b), v in interactions_hz.items():
        if a in excited and b in excited and abs(v) >= threshold:
            parent[root(a)] = root(b)
    groups: dict[str, list[str]] = {}
    for site in program.sites:
        groups.setdefault(root(site), []).append(site)
    return [tuple(g) for g in groups.values()]


def cluster_key(program: Program, model) -> tuple:
    """What makes two clusters' simulations identical: species, positions relative to the
    first atom, every segment's couplings and shifts (by local site index), pair shifts and
    which local sites each imaging reads. Noise depends only on these (species, drives and
    geometry), and is drawn independently per cluster, so identical keys may share one run."""
    origin = program.sites[model.sites[0]].position_m
    geometry = tuple(tuple(round(x - o, 15) for x, o in zip(program.sites[s].position_m, origin))
                     for s in model.sites)
    segments = tuple((seg.start_s, seg.duration_s, seg.couplings, seg.shifts, seg.interactions,
                      None if seg.image is None else (seg.image.record, tuple(s in seg.image.targets
                                                                                for s in model.sites)))
                     for seg in model.segments)
    # Pair shifts agree to rounding only (distances from different absolute positions).
    interactions = tuple((pair, float(f"{v:.10g}")) for pair, v in sorted(model.interactions.items()))
    return (model.species, geometry, segments, interactions, model.dim)


def representatives(program: Program, models: list) -> list[int]:
    """For each cluster, the index of the first cluster with an identical simulation."""
    first: dict[tuple, int] = {}
    return [first.setdefault(cluster_key(program, m), k) for k, m in enumerate(models)]
