"""Rydberg-state data from the alkali Rydberg calculator library (ARC).

ARC (package ``arc-alkali-rydberg-calculator``, ``import arc``) is imported
lazily, inside the functions that need it, so checking and compiling a sequence
never pay its start-up time. Every result goes through the disk cache of
``cache.py``; a second call with the same arguments does not touch ARC.

Units are SI throughout; frequencies are cyclic (Hz, i.e. energy / h).

Sign convention of seqlang: the pair interaction is V(R)/h = C6 / R^6 with
``C6 > 0`` repulsive. ARC returns C6 in GHz um^6 with dE = -C6 / R^6, so

    C6_seqlang [Hz m^6] = -C6_ARC [GHz um^6] * 1e9 * 1e-36.

Both atoms are taken in the stretched state m_j = j, on a shared quantisation
axis along the interatomic axis (theta = 0), where that pair state is an
eigenstate of the second-order dipole-dipole interaction.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

from seqlang.atoms.cache import cached
from seqlang.atoms.species import RydbergLevel, SpeciesData, lookup, parse_level

HZ_PER_EV = 1.602176634e-19 / 6.62607015e-34  # exact SI constants e / h
HZ_M6_PER_GHZ_UM6 = 1e9 * 1e-36
BOHR_RADIUS_M = 5.29177210903e-11  # CODATA 2018

C6_N_RANGE = 5  # pair channels with n' within n +- 5 (ARC's documented example value)
C6_ENERGY_WINDOW_HZ = 25e9  # channels with |defect| below 25 GHz
FORSTER_THRESHOLD_HZ = 100e6
SIGNIFICANT_CHANNEL_SHARE = 0.1
_MAX_CHANNEL_GROUPS = 12
BBR_LEVEL_MARGIN = 20
ARC_ATTEMPTS = 8  # retries of ARC's shared sqlite memo, about 50 s in all  # black-body sum includes levels up to n + 20

LADDERS = {"d2": 0, "blue": 1}  # intermediate nP3/2: n = ground n + offset


@dataclass(frozen=True)
class C6Result:
    """Van der Waals coefficient of a pair state and its Förster diagnosis.

    ``c6_hz_m6``: C6/h in Hz m^6, seqlang sign (positive = repulsive).
    ``forster_defect_hz``: signed energy defect E(channel) - E(pair), over h,
    of the nearest dipole-coupled pair channel that carries at least 10 % of
    C6 (the Förster channel).
    ``near_forster``: |forster_defect_hz| < 100 MHz; the perturbative C6 is
    then unreliable at typical tweezer distances.
    ``channel_fraction``: that channel's own C6 divided by the total (above 1
    when the other channels cancel part of it).
    ``crossover_radius_m``: (|C6_channel| / |defect|)^(1/6); below this distance
    the channel's dipole coupling exceeds its defect and the R^-6 law fails.
    """

    c6_hz_m6: float
    forster_defect_hz: float
    near_forster: bool
    channel_fraction: float
    crossover_radius_m: float
    source: str


@dataclass(frozen=True)
class LifetimeResult:
    """Rydberg lifetime: radiative (0 K), total at the temperature, and BBR rate (1/s)."""

    radiative_s: float
    total_s: float
    bbr_rate_hz: float


# ---------------------------------------------------------------- inputs


def _species(species: str | SpeciesData) -> SpeciesData:
    return species if isinstance(species, SpeciesData) else lookup(species)


def _level(level: str | RydbergLevel, data: SpeciesData) -> RydbergLevel:
    """Accept a label or a RydbergLevel that exists for the element."""
    if isinstance(level, str):
        level = parse_level(level)
    if level.n < data.ground_state_n or level.l >= level.n or abs(level.j - level.l) != 0.5:
        raise ValueError(f"{level.label} is not a level of {data.name}")
    return level


@lru_cache(maxsize=1)
def _arc_version() -> str:
    from importlib import metadata  # slow to import; needed only with atomic data
    return metadata.version("arc-alkali-rydberg-calculator")


@lru_cache(maxsize=None)
def _arc_atom(name: str):
    """The ARC atom object of a species (imports ARC on first use)."""
    import arc  # slow: imported only when a Rydberg quantity is computed

    return getattr(arc, lookup(name).arc_class)()


def _key(**fields) -> dict:
    return {**fields, "arc": _arc_version()}


# ---------------------------------------------------------------- energies


def _arc_energy_hz(atom, level: RydbergLevel) -> float:
    return float(atom.getEnergy(level.n, level.l, level.j)) * HZ_PER_EV


def energy_hz(species: str | SpeciesData, level: str | RydbergLevel) -> float:
    """Binding energy / h of a level in Hz, relative to the ionisation limit (< 0).

    From ARC ``getEnergy`` (eV, relative to ionisation), converted with e/h.
    """
    data = _species(species)
    lvl = _level(level, data)
    compute = lambda: _arc_energy_hz(_arc_atom(data.name), lvl)  # noqa: E731
    return cached("energy", _key(species=data.name, level=lvl.label), compute)


# ---------------------------------------------------------------- C6 and Förster channels


def _dipole_partners(data: SpeciesData, level: RydbergLevel) -> list[RydbergLevel]:
    """Levels dipole-coupled to ``level`` (dl = +-1, |dj| <= 1), n within C6_N_RANGE."""
    partners = []
    for l1 in (level.l - 1, level.l + 1):
        for j1 in (l1 - 0.5, l1 + 0.5):
            if l1 < 0 or j1 < 0 or abs(j1 - level.j) > 1:
                continue
            low = max(level.n - C6_N_RANGE, data.ground_state_n)
            partners += [RydbergLevel(n1, l1, j1) for n1 in range(low, level.n + C6_N_RANGE + 1) if l1 < n1]
    return partners


def _channel_defects_hz(a: SpeciesData, la: RydbergLevel, b: SpeciesData, lb: RydbergLevel) -> list[float]:
    """Signed defects of all pair channels inside the energy window, nearest first."""
    atom_a, atom_b = _arc_atom(a.name), _arc_atom(b.name)
    start = _arc_energy_hz(atom_a, la) + _arc_energy_hz(atom_b, lb)
    energies_a = [_arc_energy_hz(atom_a, p) for p in _dipole_partners(a, la)]
    energies_b = [_arc_energy_hz(atom_b, p) for p in _dipole_partners(b, lb)]
    defects = [ea + eb - start for ea in energies_a for eb in energies_b]
    return sorted((d for d in defects if abs(d) < C6_ENERGY_WINDOW_HZ), key=abs)


def _defect_groups(defects: list[float]) -> list[float]:
    """One representative per distinct |defect| (mirror channels share a defect)."""
    groups: list[float] = []
    for defect in defects:
        if not groups or abs(defect) > abs(groups[-1]) * (1 + 1e-9) + 1.0:
            groups.append(defect)
    return groups


def _window_above(groups: list[float], k: int) -> float:
    """An energy window that includes groups 0..k and excludes group k+1."""
    if k + 1 < len(groups):
        return math.sqrt(abs(groups[k]) * abs(groups[k + 1]))
    return C6_ENERGY_WINDOW_HZ


def arc_retry(call):
    """Run an ARC pair-state call, retried: ARC memoises angular factors in one sqlite file
    shared by all of the user's processes, and two processes filling it at once can collide."""
    import sqlite3
    import time
    for attempt in range(ARC_ATTEMPTS):
        try:
            return call()
        except sqlite3.Error:
            if attempt == ARC_ATTEMPTS - 1:
                raise
            time.sleep(0.2 * 2**attempt)  # another process holds the file: wait for it


def _arc_c6(pair, window_hz: float) -> float:
    """ARC's perturbative C6 (GHz um^6, ARC sign) with channels below ``window_hz``."""
    try:
        return float(arc_retry(lambda: pair.getC6perturbatively(0.0, 0.0, C6_N_RANGE, window_hz)))
    except ValueError as error:
        raise ValueError(f"exact Förster resonance, perturbative C6 undefined: {error}") from None


def _arc_c6_at(pair, theta: float) -> float:
    """ARC's perturbative C6 (GHz um^6, ARC sign) at angle theta to the quantisation axis."""
    return _arc_c6_theta(pair, theta, C6_ENERGY_WINDOW_HZ)


def _arc_c6_theta(pair, theta: float, window_hz: float) -> float:
    try:
        return float(arc_retry(lambda: pair.getC6perturbatively(theta, 0.0, C6_N_RANGE, window_hz)))
    except ValueError as error:
        raise ValueError(f"exact Förster resonance, perturbative C6 undefined: {error}") from None


def _forster_channel(pair, groups: list[float], total: float) -> tuple[float, float]:
    """(defect, own C6) of the nearest channel group carrying >= 10 % of ``total``.

    A group's own C6 is the growth of ARC's C6 when the energy window is opened
    just past that group's defect.
    """
    included, first = 0.0, None
    for k, defect in enumerate(groups[:_MAX_CHANNEL_GROUPS]):
        upto = _arc_c6(pair, _window_above(groups, k))
        share, included = upto - included, upto
        first = first or (defect, share)
        if abs(share) >= SIGNIFICANT_CHANNEL_SHARE * abs(total):
            return defect, share
    return first or (math.inf, 0.0)


def _arc_pair(a: SpeciesData, la: RydbergLevel, b: SpeciesData, lb: RydbergLevel):
    import arc  # slow: see _arc_atom

    second = None if a.name == b.name else _arc_atom(b.name)
    return arc.PairStateInteractions(
        _arc_atom(a.name), la.n, la.l, la.j, lb.n, lb.l, lb.j, la.j, lb.j, atom2=second
    )


def _compute_c6(a: SpeciesData, la: RydbergLevel, b: SpeciesData, lb: RydbergLevel) -> dict:
    pair = _arc_pair(a, la, b, lb)
    total = _arc_c6(pair, C6_ENERGY_WINDOW_HZ)
    defect, share = _forster_channel(pair, _defect_groups(_channel_defects_hz(a, la, b, lb)), total)
    share_hz_m6 = abs(share) * HZ_M6_PER_GHZ_UM6
    return {
        "c6_hz_m6": -total * HZ_M6_PER_GHZ_UM6,
        "forster_defect_hz": defect,
        "channel_fraction": share / total if total else math.inf,
        "crossover_radius_m": (share_hz_m6 / abs(defect)) ** (1 / 6) if defect else math.inf,
        "source": (
            f"ARC {_arc_version()} PairStateInteractions.getC6perturbatively "
            f"(theta=0, nRange={C6_N_RANGE}, energyDelta={C6_ENERGY_WINDOW_HZ:.0f} Hz, m_j=j)"
        ),
    }


def c6_hz_m6(
    species_a: str | SpeciesData,
    level_a: str | RydbergLevel,
    species_b: str | SpeciesData,
    level_b: str | RydbergLevel,
) -> C6Result:
    """C6/h (Hz m^6, positive = repulsive) of a pair state, with its Förster channel.

    >>> c6_hz_m6("Rb87", "60S1/2", "Rb87", "60S1/2").c6_hz_m6   # doctest: +SKIP
    1.3888e-25
    """
    a, b = _species(species_a), _species(species_b)
    la, lb = _level(level_a, a), _level(level_b, b)
    key = _key(
        a=a.name, level_a=la.label, mj_a=la.j, b=b.name, level_b=lb.label, mj_b=lb.j,
        n_range=C6_N_RANGE, window_hz=C6_ENERGY_WINDOW_HZ, share=SIGNIFICANT_CHANNEL_SHARE,
    )
    record = cached("c6", key, lambda: _compute_c6(a, la, b, lb))
    near = abs(record["forster_defect_hz"]) < FORSTER_THRESHOLD_HZ
    return C6Result(near_forster=near, **record)


def _c6_value(c6: C6Result | float) -> float:
    return c6.c6_hz_m6 if isinstance(c6, C6Result) else float(c6)


def interaction_hz(c6: C6Result | float, distance_m: float) -> float:
    """Pair interaction V(R)/h = C6/R^6 in Hz (seqlang sign: positive = repulsive)."""
    if distance_m <= 0:
        raise ValueError(f"distance must be positive, got {distance_m} m")
    return _c6_value(c6) / distance_m**6


def blockade_radius_m(c6: C6Result | float, rabi_hz: float) -> float:
    """Blockade radius R_b = (|C6/h| / (Omega/2pi))^(1/6) in metres.

    The distance where |C6|/R^6 equals the Rabi frequency, both as cyclic
    frequencies: C6 in Hz m^6 and ``rabi_hz`` = Omega/2pi in Hz (common practice).
    """
    if rabi_hz <= 0:
        raise ValueError(f"Rabi frequency must be positive, got {rabi_hz} Hz")
    return (abs(_c6_value(c6)) / rabi_hz) ** (1 / 6)


# ---------------------------------------------------------------- lifetimes and widths


def _compute_lifetime(name: str, level: RydbergLevel, temperature_k: float) -> dict:
    atom = _arc_atom(name)
    radiative = float(atom.getStateLifetime(level.n, level.l, level.j))
    if temperature_k == 0:
        return {"radiative_s": radiative, "total_s": radiative, "bbr_rate_hz": 0.0}
    total = float(atom.getStateLifetime(
        level.n, level.l, level.j, temperature=temperature_k,
        includeLevelsUpTo=level.n + BBR_LEVEL_MARGIN,
    ))
    return {"radiative_s": radiative, "total_s": total, "bbr_rate_hz": 1 / total - 1 / radiative}


def lifetime_s(
    species: str | SpeciesData, level: str | RydbergLevel, temperature_k: float
) -> LifetimeResult:
    """Lifetime of a level: radiative, total with black-body radiation at T, BBR rate.

    ARC ``getStateLifetime``; the black-body sum includes levels up to
    n + BBR_LEVEL_MARGIN (20), which changes the result by < 1 % against n + 40.
    """
    if temperature_k < 0:
        raise ValueError(f"temperature must be >= 0 K, got {temperature_k}")
    data = _species(species)
    lvl = _level(level, data)
    key = _key(species=data.name, level=lvl.label, temperature_k=float(temperature_k), margin=BBR_LEVEL_MARGIN)
    return LifetimeResult(**cached("lifetime", key, lambda: _compute_lifetime(data.name, lvl, temperature_k)))


def intermediate_linewidth_hz(species: str | SpeciesData, n: int, l: int, j: float) -> float:  # noqa: E741
    """Natural linewidth Gamma/2pi (Hz) of a level, from its 0 K ARC lifetime."""
    data = _species(species)
    lvl = _level(RydbergLevel(n, l, j), data)
    return 1 / (2 * math.pi * lifetime_s(data, lvl, 0.0).radiative_s)


def default_intermediate(species: str | SpeciesData, ladder: str = "d2") -> RydbergLevel:
    """Intermediate nP3/2 level of a two-photon Rydberg ladder.

    ``ladder="d2"``: the D2 excited state (lowest P3/2: Rb 5P3/2, Cs 6P3/2,
    Na 3P3/2) for red/infrared-first ladders. ``ladder="blue"``: the next P3/2
    (Rb 6P3/2, Cs 7P3/2) for blue-first ladders.
    """
    if ladder not in LADDERS:
        raise ValueError(f"unknown ladder {ladder!r}; use one of {', '.join(LADDERS)}")
    return RydbergLevel(_species(species).ground_state_n + LADDERS[ladder], 1, 1.5)


# ---------------------------------------------------------------- dipole matrix elements


def reduced_dipole_ea0(
    species: str | SpeciesData, lower: str | RydbergLevel, upper: str | RydbergLevel
) -> float:
    """Reduced dipole matrix element <J||er||J'> in units of e a0.

    Convention of Steck's D-line data (Wigner-Eckart with a Clebsch-Gordan
    coefficient): ARC's symmetric reduced element divided by sqrt(2 J_lower + 1).
    """
    data = _species(species)
    lo, up = _level(lower, data), _level(upper, data)
    symmetric = float(_arc_atom(data.name).getReducedMatrixElementJ(lo.n, lo.l, lo.j, up.n, up.l, up.j))
    return symmetric / math.sqrt(2 * lo.j + 1)


def dipole_matrix_element_ea0(
    species: str | SpeciesData,
    lower: str | RydbergLevel, mj_lower: float,
    upper: str | RydbergLevel, mj_upper: float,
) -> float:
    """<upper mj'| e r_q |lower mj> in e a0, for absorption with q = mj' - mj.

    Multiply by e a0 and the field amplitude and divide by hbar for a leg's
    Rabi frequency. Zero when |q| > 1.
    """
    data = _species(species)
    lo, up = _level(lower, data), _level(upper, data)
    q = round(mj_upper - mj_lower)
    atom = _arc_atom(data.name)
    return float(atom.getDipoleMatrixElement(lo.n, lo.l, lo.j, mj_lower, up.n, up.l, up.j, mj_upper, q))
