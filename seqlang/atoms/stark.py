"""DC Stark shifts of Rydberg levels in the quadratic regime.

The static scalar+tensor polarisability of a level |n l j m_j⟩ along the field
axis comes from second-order perturbation theory (textbook; e.g. Gallagher,
"Rydberg Atoms", Cambridge 1994, ch. 10):

    ΔE = −α E²/2,   α = 2 Σ_k |⟨k| e z |i⟩|² / (E_k − E_i)

summed over the dipole-coupled levels k (l ± 1, |Δj| ≤ 1, same m_j, n′ within
n ± STARK_N_RANGE), with ARC's energies and dipole matrix elements. The sum is
checked against ARC's own Stark map (exact diagonalisation) in
tests/test_atoms_pairs.py. The field is taken along the quantisation axis.

The quadratic law holds while the shift stays small against the gap to the
nearest coupled level; ``quadratic_limit_v_m`` is the field where the shift
reaches ``QUADRATIC_SHARE`` of that gap, a validity bound for `check`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

from .cache import cached
from .species import RydbergLevel, SpeciesData
from . import rydberg

STARK_N_RANGE = 8  # partners n' within n ± 8 carry > 99.9 % of α for S and P levels near n = 60
QUADRATIC_SHARE = 0.1
E_A0_C_M = 1.602176634e-19 * 5.29177210903e-11  # e a0 in C m (CODATA 2018)
PLANCK = 6.62607015e-34


@dataclass(frozen=True)
class Polarisability:
    """α/h in Hz/(V/m)² (ΔE/h = −α E²/2), and the field where the quadratic law ends."""

    alpha_hz_per_v2m2: float
    quadratic_limit_v_m: float


def _partners(data: SpeciesData, level: RydbergLevel, mj: float) -> list[RydbergLevel]:
    out = []
    for l1 in (level.l - 1, level.l + 1):
        for j1 in (l1 - 0.5, l1 + 0.5):
            if l1 < 0 or j1 < abs(mj) or abs(j1 - level.j) > 1:
                continue
            low = max(level.n - STARK_N_RANGE, data.ground_state_n)
            out += [RydbergLevel(n1, l1, j1) for n1 in range(low, level.n + STARK_N_RANGE + 1) if l1 < n1]
    return out


def _compute(data: SpeciesData, level: RydbergLevel, mj: float) -> dict:
    atom = rydberg._arc_atom(data.name)
    e0 = rydberg._arc_energy_hz(atom, level)
    alpha, gap, coupling_at_gap = 0.0, math.inf, 0.0
    for k in _partners(data, level, mj):
        d = float(atom.getDipoleMatrixElement(level.n, level.l, level.j, mj, k.n, k.l, k.j, mj, 0))
        coupling = d * E_A0_C_M / PLANCK  # Hz per V/m
        defect = rydberg._arc_energy_hz(atom, k) - e0
        if defect == 0 or coupling == 0:
            continue
        alpha += 2 * coupling**2 / defect
        if abs(defect) < gap:
            gap, coupling_at_gap = abs(defect), abs(coupling)
    return {"alpha": alpha, "gap_hz": gap, "coupling_hz_per_v_m": coupling_at_gap}


def polarisability(species: str | SpeciesData, level: str | RydbergLevel, mj: float | None = None) -> Polarisability:
    """Static polarisability α/h of a level along the field (default m_j = j).

    >>> polarisability("Cs133", "62S1/2").alpha_hz_per_v2m2   # doctest: +SKIP
    2.5e10
    """
    data = rydberg._species(species)
    lvl = rydberg._level(level, data)
    mj = lvl.j if mj is None else float(mj)
    return _polarisability(data.name, lvl.label, mj)


@lru_cache(maxsize=None)
def _polarisability(name: str, label: str, mj: float) -> Polarisability:
    data = rydberg._species(name)
    lvl = rydberg._level(label, data)
    key = rydberg._key(species=name, level=label, mj=mj, n_range=STARK_N_RANGE)
    record = cached("polarisability", key, lambda: _compute(data, lvl, mj))
    # The quadratic law ends where the mixing coupling·E reaches a share of the gap.
    limit = QUADRATIC_SHARE * record["gap_hz"] / record["coupling_hz_per_v_m"] if record["coupling_hz_per_v_m"] else math.inf
    return Polarisability(record["alpha"], limit)


def stark_shift_hz(species: str | SpeciesData, level: str | RydbergLevel, field_v_m: float,
                   mj: float | None = None) -> float:
    """ΔE/h = −α E²/2 in Hz for a static field along the quantisation axis."""
    if field_v_m == 0:
        return 0.0
    return -0.5 * polarisability(species, level, mj).alpha_hz_per_v2m2 * field_v_m**2
