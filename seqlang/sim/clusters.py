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
