"""Stochastic loading: which traps hold an atom, drawn per shot or given.

Each trap of species s loads independently with the rig's probability `loading`
(collisional blockade leaves at most one atom per tweezer, loaded about half the
time: Schlosser, Reymond, Protsenko & Grangier, Nature 411, 1024 (2001)), so the
number of loaded atoms of a species is binomial. The draw is seeded; the seed is
recorded in every output. A given pattern (a file of occupied site names) replaces
the draw: the lab's image of the array.
"""
from __future__ import annotations

from dataclasses import dataclass

from ..lang.diagnostics import SOURCES, Diagnostic, Span, did_you_mean, error
from ..program.model import Program


@dataclass(frozen=True)
class Occupancy:
    """Where the occupancy comes from: a seeded draw, or a given set of loaded sites."""

    seed: int = 1
    given: frozenset | None = None
    source: str | None = None  # the file the given pattern was read from
    text: str | None = None  # its text, so unknown names are shown at file:line:col

    def describe(self) -> str:
        return f"given by {self.source}" if self.given is not None else f"drawn with load seed {self.seed}"


def probabilities(program: Program) -> dict[str, float]:
    """Loading probability of each species (1 without a `loading` in the rig)."""
    return {name: float(sp.extra.get("loading", 1.0)) for name, sp in program.rig.species.items()}


def draw(program: Program, seed: int, shots: int = 1, traps=None) -> np.ndarray:
    """Loaded (True) per shot and trap, traps in program order: shape (shots, traps).

    Shot 0 is the occupancy that `check`, `compile` and `simulate` use for this seed."""
    import numpy as np
    p = probabilities(program)
    chance = np.array([p[s.species] for s in (traps or program.sites).values()])
    rng = np.random.default_rng(seed)
    return rng.random((shots, len(chance))) < chance


def loaded_sites(program: Program, occupancy: Occupancy) -> tuple[str, ...]:
    """The names of the loaded sites of one shot, in program order."""
    if occupancy.given is not None:
        return tuple(n for n in program.sites if n in occupancy.given)
    row = draw(program, occupancy.seed)[0]
    return tuple(n for n, full in zip(program.sites, row.tolist()) if full)


def read_pattern(path: str, text: str, program: Program) -> tuple[frozenset, list[Diagnostic]]:
    """Occupied site names, one per line (`#` comments); unknown names at file:line:col."""
    SOURCES.add(path, text)
    names, diags = set(), []
    for number, line in enumerate(text.splitlines(), start=1):
        name = line.split("#", 1)[0].strip()
        if not name:
            continue
        column = line.index(name) + 1
        if name not in program.sites:
            diags.append(error(f"unknown site `{name}` in the occupancy", Span(path, number, column, number,
                                                                               column + len(name), 0, 0),
                               did_you_mean(name, program.sites)))
        names.add(name)
    return frozenset(names), diags


def statistics(program: Program, seed: int, shots: int, traps=None, plans=()) -> dict:
    """Loaded counts per species over `shots` seeded draws, beside the binomial expectation,
    and for each fill the fraction of shots that load enough atoms for it."""
    import numpy as np
    traps = traps or program.sites
    table = draw(program, seed, shots, traps)
    p = probabilities(program)
    species = np.array([s.species for s in traps.values()])
    out = {}
    for name in sorted(set(species.tolist())):
        counts = table[:, species == name].sum(axis=1)
        n, q = int((species == name).sum()), p[name]
        out[name] = {"sites": n, "probability": q, "mean_loaded": float(counts.mean()),
                     "std_loaded": float(counts.std(ddof=1)) if shots > 1 else 0.0,
                     "binomial_mean": n * q, "binomial_std": float(np.sqrt(n * q * (1 - q)))}
    names = list(traps)
    fills = [{"species": plan.species, "targets": len(plan.targets),
              "enough_atoms": float((table[:, [names.index(n) for n in plan.pool]].sum(axis=1)
                                     >= len(plan.targets)).mean())} for plan in plans]
    return {"shots": shots, "seed": seed, "species": out, "fills": fills}
