"""Pair shifts V(R, θ, E) of two Rydberg atoms, and which model gives them.

``pair_shift`` is the one function the checker, `show` and the simulator call.
It chooses per pair and geometry:

* ``perturbative`` — V/h = C6(θ, E)/R⁶ with ARC's second-order C6 at the angle
  θ between the interatomic axis and the quantisation axis. Used when R is at
  least ``VALIDITY_FACTOR`` (2) crossover radii: the neglected admixture of the
  Förster channel then scales as (r_c/R)⁶ < 1.6 %.
* ``diagonalised`` — inside that distance: the pair Hamiltonian (dipole–dipole,
  –quadrupole and quadrupole–quadrupole terms) in a basis of nearby pair states
  from ARC's pair-state tool (``PairStateInteractions.defineBasis``), with the
  Stark shifts of the near channels on its diagonal; the eigenstate of largest
  overlap with the bare pair state gives V. The shift is tabulated on a fixed
  log-spaced R grid, cached on disk, and interpolated (cubic in log R).
* ``resonant`` — for a pair the rig declares resonant: V/h = C3/R³ with
  C3 = √|C6_channel·δ0| of the Förster channel (the two-level form of
  the same channel, C6 = C3²/δ).

The Förster channel (nearest dipole-coupled pair channel carrying ≥ 10 % of C6)
comes from ``rydberg.c6_hz_m6``; an electric field E along the quantisation
axis moves its defect by the Stark shifts of its four levels (``stark.py``):
δ(E) = δ0 + ΔE_a′ + ΔE_b′ − ΔE_a − ΔE_b, and its share of C6 by δ0/δ(E).
The crossover radius at the field is r_c = (C3/|δ(E)|)^(1/3). Below the Le Roy
radius 2(⟨r_a²⟩^½ + ⟨r_b²⟩^½) (R. J. Le Roy, Can. J. Phys. 52, 246 (1974);
ARC's ``getLeRoyRadius``) no multipole model holds: callers must reject it.

Not modelled: the field-induced mixing of opposite-parity levels beyond their
energy shift (permanent dipoles), magnetic fields, and hyperfine structure.
"""
from __future__ import annotations

import bisect
import math
from dataclasses import dataclass

from . import rydberg, stark
from .cache import cached, cached_either
from .species import RydbergLevel, SpeciesData

VALIDITY_FACTOR = 2.0
PAIR_N_RANGE = 2  # basis: n' within n ± 2 ...
PAIR_L_MAX = 3  # ... l' up to F ...
PAIR_WINDOW_HZ = 10e9  # ... and pair energies within 10 GHz of the bare pair
STARK_WINDOW_HZ = 2e9  # basis states this close get their Stark shifts; farther ones keep E(0)
GRID_MIN_M, GRID_MAX_M, GRID_POINTS = 0.5e-6, 50e-6, 54
DENSE_LIMIT = 400  # above this basis size, shift-invert ARPACK instead of a dense eigh
GHZ = 1e9
CHANNEL_GROUPS = 8
TIE_SHARE = 0.99


@dataclass(frozen=True)
class PairShift:
    """The pair shift of two sites and the model that gave it.

    ``shift_hz``: V/h (seqlang sign, positive = repulsive). ``overlap``:
    |⟨bare pair|eigenstate⟩|² (for the perturbative model its second-order
    estimate 1 − (r_c/R)⁶). ``defect_hz``: the Förster channel's energy defect
    at the field. ``valid``: False inside the Le Roy radius.
    """

    shift_hz: float
    model: str
    overlap: float
    defect_hz: float
    distance_m: float
    theta_rad: float
    field_v_m: float
    le_roy_radius_m: float
    crossover_radius_m: float
    c6_hz_m6: float
    c3_hz_m3: float
    near_forster: bool

    @property
    def valid(self) -> bool:
        return self.distance_m >= self.le_roy_radius_m


@dataclass(frozen=True)
class _Pair:
    a: SpeciesData
    la: RydbergLevel
    b: SpeciesData
    lb: RydbergLevel


def _pair(species_a, level_a, species_b, level_b) -> _Pair:
    a, b = rydberg._species(species_a), rydberg._species(species_b)
    return _Pair(a, rydberg._level(level_a, a), b, rydberg._level(level_b, b))


def _pair_key(p: _Pair, **more) -> dict:
    return rydberg._key(a=p.a.name, level_a=p.la.label, b=p.b.name, level_b=p.lb.label, **more)


def _cached_symmetric(kind: str, p: _Pair, compute, **more):
    """A quantity that does not change when the two atoms swap names (V(R, θ), C6, the Le Roy
    radius): a value stored for the pair written the other way round is used, so reordering
    two `site` lines does not cost a new diagonalisation."""
    swapped = _Pair(p.b, p.lb, p.a, p.la)
    return cached_either(kind, _pair_key(p, **more), _pair_key(swapped, **more), compute)


# ---------------------------------------------------------------- radii and channels


def le_roy_radius_m(species_a, level_a, species_b, level_b) -> float:
    """Le Roy radius of the pair in metres (ARC ``getLeRoyRadius``)."""
    p = _pair(species_a, level_a, species_b, level_b)
    compute = lambda: float(rydberg._arc_pair(p.a, p.la, p.b, p.lb).getLeRoyRadius()) * 1e-6  # noqa: E731
    return _cached_symmetric("leroy", p, compute)


def _levels_with_defect(p: _Pair, defect_hz: float) -> list[list[str]]:
    """The channel level pairs (a′, b′) whose zero-field defect is ``defect_hz``."""
    start = rydberg.energy_hz(p.a, p.la) + rydberg.energy_hz(p.b, p.lb)
    out = []
    for pa in rydberg._dipole_partners(p.a, p.la):
        for pb in rydberg._dipole_partners(p.b, p.lb):
            defect = rydberg.energy_hz(p.a, pa) + rydberg.energy_hz(p.b, pb) - start
            if abs(defect - defect_hz) < 1e3:
                out.append([pa.label, pb.label])
    return out


def _compute_channels(p: _Pair) -> list[dict]:
    """The nearest channel groups: zero-field defect, own C6 share (Hz m⁶, seqlang sign), levels.

    A group's share is the growth of ARC's C6 when its energy window opens past
    the group (as in ``rydberg._forster_channel``).
    """
    pair = rydberg._arc_pair(p.a, p.la, p.b, p.lb)
    groups = rydberg._defect_groups(rydberg._channel_defects_hz(p.a, p.la, p.b, p.lb))
    out, included = [], 0.0
    for k, defect in enumerate(groups[:CHANNEL_GROUPS]):
        upto = rydberg._arc_c6(pair, rydberg._window_above(groups, k))
        share, included = upto - included, upto
        out.append({"defect_hz": defect, "c6_hz_m6": -share * rydberg.HZ_M6_PER_GHZ_UM6,
                    "levels": _levels_with_defect(p, defect)})
    return out


def channels(species_a, level_a, species_b, level_b) -> list[dict]:
    """The CHANNEL_GROUPS nearest pair channels of the pair (cached)."""
    p = _pair(species_a, level_a, species_b, level_b)
    key = _pair_key(p, groups=CHANNEL_GROUPS, n_range=rydberg.C6_N_RANGE, window_hz=rydberg.C6_ENERGY_WINDOW_HZ)
    return cached("channels", key, lambda: _compute_channels(p))


def _mj(level: RydbergLevel, like: RydbergLevel) -> float:
    """A channel level's m_j: that of the initial level (the q = 0 component), within j."""
    return min(level.j, like.j)


def _channel_defect(p: _Pair, channel: dict, field_v_m: float) -> float:
    """δ(E) = δ0 + ΔE_a′ + ΔE_b′ − ΔE_a − ΔE_b of one channel."""
    if field_v_m == 0 or not channel["levels"]:
        return channel["defect_hz"]
    ca, cb = (rydberg._level(x, s) for x, s in zip(channel["levels"][0], (p.a, p.b)))
    moved = stark.stark_shift_hz(p.a, ca, field_v_m, _mj(ca, p.la)) + stark.stark_shift_hz(p.b, cb, field_v_m, _mj(cb, p.lb))
    moved -= stark.stark_shift_hz(p.a, p.la, field_v_m) + stark.stark_shift_hz(p.b, p.lb, field_v_m)
    return channel["defect_hz"] + moved


@dataclass(frozen=True)
class Channel:
    """A pair channel at a field: its defect δ(E), C3 = √|C6_share·δ0| and crossover (C3/|δ|)^⅓."""

    levels: tuple[str, str]
    defect_hz: float
    c3_hz_m3: float
    crossover_radius_m: float


def channels_at_field(species_a, level_a, species_b, level_b, field_v_m: float = 0.0) -> list[Channel]:
    """The pair channels at a field, the one with the largest crossover radius first.

    The largest crossover radius marks the channel that matters most: a close
    but weakly coupled channel has a small one and is not a Förster channel.
    """
    p = _pair(species_a, level_a, species_b, level_b)
    out = []
    for channel in channels(p.a, p.la, p.b, p.lb):
        defect = _channel_defect(p, channel, field_v_m)
        c3 = math.sqrt(abs(channel["c6_hz_m6"] * channel["defect_hz"]))
        crossover = (c3 / abs(defect)) ** (1 / 3) if defect else math.inf
        levels = tuple(channel["levels"][0]) if channel["levels"] else ("?", "?")
        out.append(Channel(levels, defect, c3, crossover))
    return sorted(out, key=lambda c: -c.crossover_radius_m)


def dominant_channel(species_a, level_a, species_b, level_b, field_v_m: float = 0.0) -> Channel | None:
    found = channels_at_field(species_a, level_a, species_b, level_b, field_v_m)
    return found[0] if found else None


# ---------------------------------------------------------------- perturbative C6 at an angle


def _c6_at_angle_hz_m6(p: _Pair, theta: float) -> float:
    """ARC's second-order C6 at angle θ (seqlang sign); θ = 0 is rydberg.c6_hz_m6."""
    if abs(theta) < 1e-9:
        return rydberg.c6_hz_m6(p.a, p.la, p.b, p.lb).c6_hz_m6
    def compute():
        pair = rydberg._arc_pair(p.a, p.la, p.b, p.lb)
        arc_c6 = rydberg._arc_c6_at(pair, theta)
        return -arc_c6 * rydberg.HZ_M6_PER_GHZ_UM6
    return _cached_symmetric("c6angle", p, compute, theta=round(theta, 9), n_range=rydberg.C6_N_RANGE,
                             window_hz=rydberg.C6_ENERGY_WINDOW_HZ)


def c6_at_hz_m6(species_a, level_a, species_b, level_b, theta_rad: float = 0.0, field_v_m: float = 0.0) -> float:
    """C6/h at angle θ and field E: each channel's share rescaled by δ0/δ(E)."""
    p = _pair(species_a, level_a, species_b, level_b)
    c6 = _c6_at_angle_hz_m6(p, theta_rad)
    if field_v_m == 0:
        return c6
    for channel in channels(p.a, p.la, p.b, p.lb):
        defect = _channel_defect(p, channel, field_v_m)
        c6 += channel["c6_hz_m6"] * (channel["defect_hz"] / defect - 1) if defect else math.inf
    return c6


# ---------------------------------------------------------------- diagonalisation


def _grid_m() -> list[float]:
    ratio = (GRID_MAX_M / GRID_MIN_M) ** (1 / (GRID_POINTS - 1))
    return [GRID_MIN_M * ratio**k for k in range(GRID_POINTS)]


def _stark_diagonal_ghz(p: _Pair, states, diagonal, field_v_m: float):
    """Stark shifts (GHz) of the basis states near the bare pair, relative to its own shift."""
    import numpy as np
    shifts = np.zeros(len(states))
    if field_v_m == 0:
        return shifts
    def level_shift(data, n, l, j, mj):
        return stark.stark_shift_hz(data, RydbergLevel(int(n), int(l), float(j)), field_v_m, abs(float(mj)))
    bare = level_shift(p.a, p.la.n, p.la.l, p.la.j, p.la.j) + level_shift(p.b, p.lb.n, p.lb.l, p.lb.j, p.lb.j)
    for k, s in enumerate(states):
        if abs(diagonal[k]) * GHZ < STARK_WINDOW_HZ:
            shifts[k] = (level_shift(p.a, *s[0:4]) + level_shift(p.b, *s[4:8]) - bare) / GHZ
    return shifts


def _eigen_near(matrix, index: int, dense: bool):
    """(eigenvalue, overlap) of the eigenvector of largest weight on ``index``."""
    import numpy as np
    if dense:
        values, vectors = np.linalg.eigh(matrix)
    else:
        from scipy.sparse.linalg import eigsh
        values, vectors = eigsh(matrix, k=16, sigma=float(matrix[index, index]), which="LM", tol=1e-9)
    weights = np.abs(vectors[index]) ** 2
    # Exact resonances split the bare state evenly over two branches: take the upper one
    # every time, so that the tabulated V keeps one sign.
    ties = np.flatnonzero(weights >= TIE_SHARE * weights.max())
    best = int(ties[np.argmax(values[ties])])
    return float(values[best]), float(weights[best])


def _define_basis(pair, theta: float) -> None:
    rydberg.arc_retry(lambda: pair.defineBasis(theta, 0.0, PAIR_N_RANGE, PAIR_L_MAX, PAIR_WINDOW_HZ,
                                               progressOutput=False))


def _compute_table(p: _Pair, theta: float, field_v_m: float) -> dict:
    import numpy as np
    pair = rydberg._arc_pair(p.a, p.la, p.b, p.lb)
    _define_basis(pair, theta)
    diagonal = pair.matDiagonal.toarray().diagonal()
    base = np.diag(diagonal + _stark_diagonal_ghz(p, pair.basisStates, diagonal, field_v_m))
    terms = [m.toarray() for m in pair.matR]  # R^-3, R^-4, R^-5 parts (GHz at 1 m)
    index, dense = pair.originalPairStateIndex, len(diagonal) <= DENSE_LIMIT
    shifts, overlaps = [], []
    for r in _grid_m():
        matrix = base + sum(term / r ** (3 + k) for k, term in enumerate(terms))
        value, weight = _eigen_near(matrix, index, dense)
        shifts.append((value - base[index, index]) * GHZ)
        overlaps.append(weight)
    return {"r_m": _grid_m(), "v_hz": shifts, "overlap": overlaps, "basis": len(diagonal)}


def diagonalised_table(species_a, level_a, species_b, level_b, theta_rad: float = 0.0,
                       field_v_m: float = 0.0) -> dict:
    """V(R) and overlap on the fixed R grid, from the pair-state diagonalisation (cached)."""
    p = _pair(species_a, level_a, species_b, level_b)
    theta, field = round(theta_rad, 6), round(field_v_m, 4)
    return _cached_symmetric("pairtable", p, lambda: _compute_table(p, theta, field), theta=theta, field=field,
                             n_range=PAIR_N_RANGE, l_max=PAIR_L_MAX, window_hz=PAIR_WINDOW_HZ,
                             stark_window_hz=STARK_WINDOW_HZ, tie=TIE_SHARE,
                             grid=[GRID_MIN_M, GRID_MAX_M, GRID_POINTS])


def _interpolate(table: dict, distance_m: float) -> tuple[float, float]:
    """V and overlap at R: V·R³ by a cubic through the four nearest grid points in log R.

    V·R³ is smooth in both the R⁻³ and the R⁻⁶ regimes; the overlap is interpolated linearly.
    Plain Python: a warm `check` must not pay for importing numpy.
    """
    log_r = [math.log(r) for r in table["r_m"]]
    scaled = [v * r**3 for v, r in zip(table["v_hz"], table["r_m"])]
    x = math.log(min(max(distance_m, GRID_MIN_M), GRID_MAX_M))
    upper = min(max(bisect.bisect_left(log_r, x), 1), len(log_r) - 1)
    k = min(max(upper - 2, 0), len(log_r) - 4)
    xs, ys = log_r[k:k + 4], scaled[k:k + 4]
    value = sum(ys[i] * math.prod((x - xs[j]) / (xs[i] - xs[j]) for j in range(4) if j != i) for i in range(4))
    share = (x - log_r[upper - 1]) / (log_r[upper] - log_r[upper - 1])
    overlap = table["overlap"][upper - 1] + share * (table["overlap"][upper] - table["overlap"][upper - 1])
    return value / distance_m**3, overlap


# ---------------------------------------------------------------- the one entry point


def pair_shift(species_a, level_a, species_b, level_b, distance_m: float, theta_rad: float = 0.0,
               field_v_m: float = 0.0, resonant: bool = False) -> PairShift:
    """V/h of the pair at distance R, angle θ to the quantisation axis and field E, with its model."""
    if distance_m <= 0:
        raise ValueError(f"distance must be positive, got {distance_m} m")
    p = _pair(species_a, level_a, species_b, level_b)
    channel = dominant_channel(p.a, p.la, p.b, p.lb, field_v_m)
    defect = channel.defect_hz if channel else math.inf
    c3 = channel.c3_hz_m3 if channel else 0.0
    crossover = channel.crossover_radius_m if channel else 0.0
    c6 = c6_at_hz_m6(p.a, p.la, p.b, p.lb, theta_rad, field_v_m)
    common = dict(defect_hz=defect, distance_m=distance_m, theta_rad=theta_rad, field_v_m=field_v_m,
                  le_roy_radius_m=le_roy_radius_m(p.a, p.la, p.b, p.lb), crossover_radius_m=crossover,
                  c6_hz_m6=c6, c3_hz_m3=c3, near_forster=abs(defect) < rydberg.FORSTER_THRESHOLD_HZ)
    if resonant:
        return PairShift(math.copysign(c3, c6) / _power(distance_m, 3), "resonant", 0.5, **common)
    if distance_m >= VALIDITY_FACTOR * crossover or distance_m > GRID_MAX_M:
        overlap = 1 - min(1.0, crossover / distance_m) ** 6
        return PairShift(c6 / _power(distance_m, 6), "perturbative", overlap, **common)
    table = diagonalised_table(p.a, p.la, p.b, p.lb, theta_rad, field_v_m)
    value, overlap = _interpolate(table, distance_m)
    return PairShift(value, "diagonalised", overlap, **common)


def _power(distance_m: float, exponent: int) -> float:
    """R^k for the C3/C6 laws, kept finite and non-zero whatever distance a program states."""
    try:
        return max(distance_m, 1e-12) ** exponent
    except OverflowError:  # beyond ~1e51 m: no interaction at all
        return math.inf


def angle_to_axis(a_m, b_m, axis) -> float:
    """θ between the interatomic vector and the quantisation axis (0 when no axis is set)."""
    if axis is None:
        return 0.0
    d = [y - x for x, y in zip(a_m, b_m)]
    norm = math.sqrt(sum(c * c for c in d)) * math.sqrt(sum(c * c for c in axis))
    cos = abs(sum(x * y for x, y in zip(d, axis))) / norm
    return math.acos(min(1.0, cos))
