"""Physical quantities: a value in SI units and its dimension.

Frequencies are cyclic (``1.2 MHz`` is Ω/2π = 1.2e6 Hz). Angles are plain
numbers in radians, as in SI: ``pi``, ``rad`` and ``deg`` are factors, so that
``1 / (2*pi*1 MHz)`` is a duration.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass

# Base dimensions, in this order, for the exponent tuples below.
BASES = ("s", "m", "K", "V", "A", "G", "W")


def _dim(**exponents: int) -> tuple[int, ...]:
    return tuple(exponents.get(b, 0) for b in BASES)


DIMENSIONLESS = _dim()
DURATION = _dim(s=1)
FREQUENCY = _dim(s=-1)
LENGTH = _dim(m=1)
TEMPERATURE = _dim(K=1)
ANGLE = DIMENSIONLESS  # radians
VOLTAGE = _dim(V=1)
CURRENT = _dim(A=1)
FIELD = _dim(G=1)
POWER = _dim(W=1)

KIND_NAMES = {
    DIMENSIONLESS: "a plain number or angle",
    DURATION: "a duration",
    FREQUENCY: "a frequency",
    LENGTH: "a length",
    TEMPERATURE: "a temperature",
    VOLTAGE: "a voltage",
    CURRENT: "a current",
    FIELD: "a magnetic field",
    POWER: "a power",
}

# unit symbol -> (SI factor, dimension)
UNITS: dict[str, tuple[float, tuple[int, ...]]] = {
    "THz": (1e12, FREQUENCY), "GHz": (1e9, FREQUENCY), "MHz": (1e6, FREQUENCY),
    "kHz": (1e3, FREQUENCY), "Hz": (1.0, FREQUENCY),
    "s": (1.0, DURATION), "ms": (1e-3, DURATION), "us": (1e-6, DURATION),
    "µs": (1e-6, DURATION), "ns": (1e-9, DURATION), "ps": (1e-12, DURATION),
    "m": (1.0, LENGTH), "cm": (1e-2, LENGTH), "mm": (1e-3, LENGTH),
    "um": (1e-6, LENGTH), "µm": (1e-6, LENGTH), "nm": (1e-9, LENGTH),
    "K": (1.0, TEMPERATURE), "mK": (1e-3, TEMPERATURE), "uK": (1e-6, TEMPERATURE),
    "µK": (1e-6, TEMPERATURE), "nK": (1e-9, TEMPERATURE),
    "rad": (1.0, ANGLE), "mrad": (1e-3, ANGLE), "deg": (math.pi / 180, ANGLE),
    "pi": (math.pi, ANGLE),
    "%": (0.01, DIMENSIONLESS),
    "V": (1.0, VOLTAGE), "mV": (1e-3, VOLTAGE),
    "A": (1.0, CURRENT), "mA": (1e-3, CURRENT),
    "G": (1.0, FIELD), "mG": (1e-3, FIELD),
    "W": (1.0, POWER), "mW": (1e-3, POWER), "uW": (1e-6, POWER), "µW": (1e-6, POWER),
}

# Units suggested for each kind in messages and in editor completion.
PREFERRED_UNIT = {
    DURATION: "ns", FREQUENCY: "MHz", LENGTH: "um", TEMPERATURE: "uK",
    VOLTAGE: "V", CURRENT: "A", FIELD: "G", POWER: "mW", DIMENSIONLESS: "",
}


def kind_name(dim: tuple[int, ...]) -> str:
    """Words for a dimension, e.g. "a frequency" or "a quantity in m^2"."""
    if dim in KIND_NAMES:
        return KIND_NAMES[dim]
    parts = [f"{b}^{e}" if e != 1 else b for b, e in zip(BASES, dim) if e]
    return "a quantity in " + " ".join(parts)


@dataclass(frozen=True, slots=True)
class Quantity:
    """A value in SI units with its dimension (exponents over :data:`BASES`)."""

    value: float
    dim: tuple[int, ...] = DIMENSIONLESS

    def __add__(self, other: "Quantity") -> "Quantity":
        return Quantity(self.value + other.value, self.dim)

    def __sub__(self, other: "Quantity") -> "Quantity":
        return Quantity(self.value - other.value, self.dim)

    def __mul__(self, other: "Quantity") -> "Quantity":
        return Quantity(self.value * other.value, _combine(self.dim, other.dim, 1))

    def __truediv__(self, other: "Quantity") -> "Quantity":
        return Quantity(self.value / other.value, _combine(self.dim, other.dim, -1))

    def __neg__(self) -> "Quantity":
        return Quantity(-self.value, self.dim)

    def power(self, exponent: float) -> "Quantity":
        if exponent != int(exponent) and self.dim != DIMENSIONLESS:
            raise ValueError("only whole powers of a quantity with units are allowed")
        return Quantity(self.value ** exponent, tuple(int(e * exponent) for e in self.dim))

    @property
    def kind(self) -> str:
        return kind_name(self.dim)

    def describe(self) -> str:
        """Human-readable value in a sensible unit, e.g. "1.3 MHz"."""
        return format_quantity(self.value, self.dim)


@functools.lru_cache(maxsize=1024)
def _combine(a: tuple[int, ...], b: tuple[int, ...], sign: int) -> tuple[int, ...]:
    # Cached: a program uses a handful of dimensions, and every `3pi/8` multiplies two.
    return tuple(x + sign * y for x, y in zip(a, b))


_SCALES = {
    DURATION: (("s", 1.0), ("ms", 1e-3), ("us", 1e-6), ("ns", 1e-9), ("ps", 1e-12)),
    FREQUENCY: (("GHz", 1e9), ("MHz", 1e6), ("kHz", 1e3), ("Hz", 1.0)),
    LENGTH: (("m", 1.0), ("mm", 1e-3), ("um", 1e-6), ("nm", 1e-9)),
    TEMPERATURE: (("K", 1.0), ("mK", 1e-3), ("uK", 1e-6), ("nK", 1e-9)),
    VOLTAGE: (("V", 1.0), ("mV", 1e-3)),
    CURRENT: (("A", 1.0), ("mA", 1e-3)),
    FIELD: (("G", 1.0), ("mG", 1e-3)),
    POWER: (("W", 1.0), ("mW", 1e-3), ("uW", 1e-6)),
}


def format_quantity(value: float, dim: tuple[int, ...]) -> str:
    """Format with the largest unit that keeps the number at or above 1."""
    for unit, factor in _SCALES.get(dim, ()):
        if abs(value) >= factor or factor == _SCALES[dim][-1][1]:
            return f"{value / factor:.6g} {unit}"
    suffix = "" if dim == DIMENSIONLESS else f" ({kind_name(dim)})"
    return f"{value:.6g}{suffix}"
