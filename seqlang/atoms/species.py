"""Built-in species table, clock-qubit states and Rydberg level labels.

Pure Python on purpose: checking and compiling a sequence import this module,
and it must not pull in the Rydberg calculator library (see ``rydberg.py``).

Every number carries its source. Masses are atomic masses in unified atomic
mass units (the value in the D-line compilation or the atomic mass table),
converted with the CODATA 2018 value of u.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from fractions import Fraction

ATOMIC_MASS_UNIT_KG = 1.66053906660e-27  # CODATA 2018

_L_LETTERS = "SPDFGHIK"  # spectroscopic letters for l = 0, 1, 2, ... (J is skipped)


@dataclass(frozen=True)
class SpeciesData:
    """Fixed atomic data of one alkali isotope, each number with its source."""

    name: str
    element: str
    ground_state_n: int
    mass_kg: float
    mass_source: str
    nuclear_spin: float
    hyperfine_hz: float
    hyperfine_source: str
    arc_class: str
    d2_wavelength_m: float
    d2_linewidth_hz: float
    d2_source: str


@dataclass(frozen=True)
class QubitState:
    """A ground-state hyperfine sublevel |F, mF>."""

    F: float
    mF: float

    @property
    def label(self) -> str:
        """Text such as ``F=1,mF=0`` or ``F=9/2,mF=1/2``."""
        return f"F={_half(self.F)},mF={_half(self.mF)}"


@dataclass(frozen=True)
class RydbergLevel:
    """A fine-structure level n l_j of the valence electron, e.g. 58S1/2."""

    n: int
    l: int  # noqa: E741 - the trade's name for the orbital quantum number
    j: float

    @property
    def label(self) -> str:
        """Spectroscopic label such as ``58S1/2``."""
        return f"{self.n}{_L_LETTERS[self.l]}{_half(self.j)}"


def _half(value: float) -> str:
    """Write 0.5 as ``1/2``, 4.5 as ``9/2`` and whole numbers as integers."""
    fraction = Fraction(value).limit_denominator(2)
    return str(fraction.numerator) if fraction.denominator == 1 else f"{fraction.numerator}/2"


def _u(mass_u: float) -> float:
    return mass_u * ATOMIC_MASS_UNIT_KG


_ARIMONDO = "Arimondo, Inguscio & Violino, Rev. Mod. Phys. 49, 31 (1977)"
_AME = "atomic mass table (AME), from memory"

_TABLE = (
    SpeciesData(
        "Li6", "Li", 2, _u(6.0151228874), _AME, 1.0, 228.2052590e6, _ARIMONDO,
        "Lithium6", 670.977e-9, 5.8724e6,
        "M. E. Gehm, Properties of 6Li (2003), vacuum D2 line; from memory",
    ),
    SpeciesData(
        "Li7", "Li", 2, _u(7.016003437), _AME, 1.5, 803.5040866e6, _ARIMONDO,
        "Lithium7", 670.961e-9, 5.8724e6,
        "vacuum D2 line and width as for Li6 (Gehm 2003); from memory",
    ),
    SpeciesData(
        "Na23", "Na", 3, _u(22.9897692820),
        "D. A. Steck, Sodium D Line Data", 1.5, 1771.6261288e6,
        "D. A. Steck, Sodium D Line Data; " + _ARIMONDO,
        "Sodium", 589.1583264e-9, 9.7946e6,
        "D. A. Steck, Sodium D Line Data (vacuum wavelength); from memory",
    ),
    SpeciesData(
        "K39", "K", 4, _u(38.9637064864), _AME, 1.5, 461.7197202e6,
        _ARIMONDO + " (Peper et al., PRA 100, 012501 (2019): 461.719700 MHz)",
        "Potassium39", 766.700921822e-9, 6.035e6,
        "T. G. Tiecke, Properties of Potassium (2010); from memory",
    ),
    SpeciesData(
        "K40", "K", 4, _u(39.963998166), _AME, 4.0, -1285.790e6,
        _ARIMONDO + " (inverted; last digits from memory)",
        "Potassium40", 766.700674872e-9, 6.035e6,
        "T. G. Tiecke, Properties of Potassium (2010); from memory",
    ),
    SpeciesData(
        "K41", "K", 4, _u(40.9618252579), _AME, 1.5, 254.0138720e6, _ARIMONDO,
        "Potassium41", 766.70045e-9, 6.035e6,
        "T. G. Tiecke, Properties of Potassium (2010); from memory",
    ),
    SpeciesData(
        "Rb85", "Rb", 5, _u(84.911789738),
        "D. A. Steck, Rubidium 85 D Line Data", 2.5, 3035.7324390e6,
        "D. A. Steck, Rubidium 85 D Line Data",
        "Rubidium85", 780.241368271e-9, 6.0666e6,
        "D. A. Steck, Rubidium 85 D Line Data (vacuum wavelength)",
    ),
    SpeciesData(
        "Rb87", "Rb", 5, _u(86.909180527),
        "D. A. Steck, Rubidium 87 D Line Data", 1.5, 6834.68261090429e6,
        "D. A. Steck, Rubidium 87 D Line Data",
        "Rubidium87", 780.241209686e-9, 6.0666e6,
        "D. A. Steck, Rubidium 87 D Line Data (vacuum wavelength)",
    ),
    SpeciesData(
        "Cs133", "Cs", 6, _u(132.905451961),
        "D. A. Steck, Cesium D Line Data", 3.5, 9192631770.0,
        "SI definition of the second (CGPM 2018), exact",
        "Caesium", 852.34727582e-9, 5.234e6,
        "D. A. Steck, Cesium D Line Data (vacuum wavelength); width from memory",
    ),
)

_BY_NAME = {species.name: species for species in _TABLE}


def names() -> tuple[str, ...]:
    """Names of all built-in species, e.g. ``('Li6', ..., 'Cs133')``."""
    return tuple(_BY_NAME)


def lookup(name: str) -> SpeciesData:
    """Species data by name (``'Rb87'``; case does not matter); KeyError if unknown."""
    if isinstance(name, SpeciesData):
        return name
    for known, species in _BY_NAME.items():
        if known.lower() == str(name).lower():
            return species
    raise KeyError(f"unknown species {name!r}; known species: {', '.join(names())}")


def _as_species(species: str | SpeciesData) -> SpeciesData:
    return species if isinstance(species, SpeciesData) else lookup(species)


def hyperfine_manifolds(species: str | SpeciesData) -> tuple[float, float]:
    """Ground-state F values (lower energy, upper energy); J = 1/2 for alkalis.

    Normal ordering puts F = I - 1/2 lowest; an inverted splitting (K40,
    negative ``hyperfine_hz``) puts F = I + 1/2 lowest.
    """
    data = _as_species(species)
    small, large = data.nuclear_spin - 0.5, data.nuclear_spin + 0.5
    return (large, small) if data.hyperfine_hz < 0 else (small, large)


def clock_states(species: str | SpeciesData) -> tuple[QubitState, QubitState]:
    """Default qubit pair (lower-energy state, upper-energy state).

    For integer F (all bosons here, and Na23, K39, K41, Rb85, Rb87, Cs133) this is
    the clock pair mF = 0 in both hyperfine manifolds, magnetically insensitive to
    first order at low field (common practice).

    Li6 (I = 1) and K40 (I = 4) have half-integer F and no mF = 0 level. There
    the default is mF = +1/2 in both manifolds: a convention of seqlang, NOT a
    magnetically insensitive pair at low field (its splitting shifts linearly
    with B). For K40 the inverted structure puts F = 9/2 below F = 7/2.
    """
    lower_f, upper_f = hyperfine_manifolds(species)
    m = 0.0 if float(lower_f).is_integer() else 0.5
    return QubitState(lower_f, m), QubitState(upper_f, m)


def _check_state(data: SpeciesData, state: QubitState) -> None:
    allowed = hyperfine_manifolds(data)
    if state.F not in allowed:
        raise ValueError(
            f"{data.name} has no ground hyperfine level F={_half(state.F)}; "
            f"I={_half(data.nuclear_spin)} allows F={_half(min(allowed))} or F={_half(max(allowed))}"
        )
    if abs(state.mF) > state.F or not float(state.F - state.mF).is_integer():
        raise ValueError(
            f"mF={_half(state.mF)} is not a sublevel of F={_half(state.F)} "
            f"(need |mF| <= F in integer steps from F)"
        )


def qubit_frequency_hz(
    species: str | SpeciesData, lower: QubitState, upper: QubitState
) -> float:
    """Zero-field energy of ``upper`` minus ``lower``, divided by h, in Hz.

    At zero field all sublevels of one F manifold are degenerate, so the result
    is the signed hyperfine splitting when the states sit in different
    manifolds and 0 when they share F. ValueError for states that do not exist.
    """
    data = _as_species(species)
    _check_state(data, lower)
    _check_state(data, upper)
    energy = {data.nuclear_spin + 0.5: data.hyperfine_hz, data.nuclear_spin - 0.5: 0.0}
    return energy[upper.F] - energy[lower.F]


_LEVEL_PATTERN = re.compile(r"^\s*(\d+)\s*([A-Za-z])\s*(\d+)\s*/\s*2\s*$")
# Rydberg levels used in the lab lie well below this (common practice: n of 30 to 150); the
# quantum defects and matrix elements of the atomic-data library are not meant far beyond.
MAX_RYDBERG_N = 200


def parse_level(text: str, species: str | SpeciesData | None = None) -> RydbergLevel:
    """Parse a label such as ``58S1/2`` or ``43D5/2`` into a RydbergLevel.

    Checks j = l +- 1/2 and l < n; when ``species`` is given also that n lies
    above the ground-state n of that element. ValueError for bad text.
    """
    match = _LEVEL_PATTERN.match(text)
    if not match:
        raise ValueError(f"cannot read level {text!r}: expected e.g. '58S1/2' or '43D5/2'")
    letter = match.group(2).upper()
    if len(match.group(1)) > 4 or int(match.group(1)) > MAX_RYDBERG_N:
        raise ValueError(f"level {text[:40]!r}{'...' if len(text) > 40 else ''}: n above {MAX_RYDBERG_N} "
                         "is beyond the atomic data (Rydberg levels in use have n of about 30 to 150)")
    if len(match.group(3)) > 4:
        raise ValueError(f"level {text[:40]!r}...: j is not a half-integer of the level's l ± 1/2")
    if letter not in _L_LETTERS:
        raise ValueError(f"unknown orbital letter {match.group(2)!r} in {text!r}; use one of {_L_LETTERS}")
    level = RydbergLevel(int(match.group(1)), _L_LETTERS.index(letter), int(match.group(3)) / 2)
    _check_level(level, text)
    if species is not None:
        _check_above_ground(level, _as_species(species))
    return level


def _check_level(level: RydbergLevel, text: str) -> None:
    if abs(level.j - level.l) != 0.5:
        raise ValueError(f"level {text!r}: j must be l +- 1/2, i.e. {_allowed_j(level.l)}")
    if level.l >= level.n:
        raise ValueError(f"level {text!r}: l={level.l} needs n > l")


def _allowed_j(l: int) -> str:  # noqa: E741
    return " or ".join(_half(l + s) for s in (-0.5, 0.5) if l + s >= 0)


def _check_above_ground(level: RydbergLevel, data: SpeciesData) -> None:
    if level.n <= data.ground_state_n:
        raise ValueError(
            f"level {level.label} of {data.name}: a Rydberg level needs n above "
            f"the ground-state n = {data.ground_state_n} of {data.element}"
        )
