"""Pulse envelopes: shape functions on [0, T] with peak 1, and their areas.

The area factor ∫₀ᵀ f(t) dt is computed numerically (adaptive quadrature), so a
new shape needs only its function. A pulse's area is 2π·f_Rabi·∫f dt.
"""
from __future__ import annotations

import functools
import math
from typing import TYPE_CHECKING

from ..program.model import Shape

if TYPE_CHECKING:
    import numpy as np

SHAPES = ("square", "ramped", "gaussian", "blackman")
# Parameters each shape accepts; durations in seconds.
SHAPE_PARAMS = {"square": (), "ramped": ("ramp",), "gaussian": ("sigma",), "blackman": ()}
DEFAULT_GAUSSIAN_SIGMA_FRACTION = 0.25  # σ = T/4: the pulse spans ±2σ


def envelope(shape: Shape, duration_s: float, t: np.ndarray | float) -> np.ndarray:
    """Envelope values (peak 1) at times t within [0, duration]."""
    import numpy as np  # imported where used: `seqlang check` of square pulses starts without it
    t = np.asarray(t, dtype=float)
    if shape.kind == "square":
        return np.ones_like(t)
    if shape.kind == "gaussian":
        sigma = shape.param("sigma", DEFAULT_GAUSSIAN_SIGMA_FRACTION * duration_s)
        return np.exp(-((t - duration_s / 2) ** 2) / (2 * sigma**2))
    if shape.kind == "blackman":
        x = 2 * np.pi * t / duration_s
        return 0.42 - 0.5 * np.cos(x) + 0.08 * np.cos(2 * x)
    if shape.kind == "ramped":
        return _ramped(shape.param("ramp", 0.0), duration_s, t)
    raise ValueError(f"unknown shape {shape.kind}")


def _ramped(ramp: float, duration: float, t: np.ndarray) -> np.ndarray:
    """Flat top with sin² ramps of length `ramp` at both ends (common practice)."""
    import numpy as np
    if ramp <= 0:
        return np.ones_like(t)
    up = np.clip(t / ramp, 0.0, 1.0)
    down = np.clip((duration - t) / ramp, 0.0, 1.0)
    return np.sin(np.pi / 2 * np.minimum(up, down)) ** 2


@functools.lru_cache(maxsize=4096)
def area_factor(shape: Shape, duration_s: float) -> float:
    """∫₀ᵀ f(t) dt in seconds for the envelope of peak 1."""
    if shape.kind == "square":
        return duration_s
    from scipy import integrate
    value, _ = integrate.quad(lambda t: float(envelope(shape, duration_s, t)), 0.0, duration_s,
                              epsabs=0.0, epsrel=1e-12, limit=200)
    return value


def pulse_area(shape: Shape, duration_s: float, rabi_hz: float) -> float:
    """Rotation angle (rad) of a pulse: 2π·f_Rabi·∫f dt."""
    return 2 * math.pi * rabi_hz * area_factor(shape, duration_s)


def duration_for_area(shape: Shape, area_rad: float, rabi_hz: float) -> float:
    """The duration whose pulse area is `area_rad` at peak Rabi frequency `rabi_hz`."""
    target = area_rad / (2 * math.pi * rabi_hz)
    if shape.kind == "square":
        return target
    if _scales_with_duration(shape):
        return target / area_factor(shape, 1.0)
    high = max(target, 1e-12)
    while area_factor(shape, high) < target:
        # A Gaussian of fixed σ never exceeds the area σ·sqrt(2π), however long it lasts.
        if high > 1e6 * target:
            raise ValueError(f"a {shape.kind} envelope with these parameters cannot reach this area")
        high *= 2
    from scipy import optimize
    return optimize.brentq(lambda T: area_factor(shape, T) - target, 1e-15, high, xtol=1e-18, rtol=1e-13)


def _scales_with_duration(shape: Shape) -> bool:
    """True when the shape has no absolute time parameter, so its area is c·T."""
    return shape.kind == "blackman" or (shape.kind == "gaussian" and not shape.params)


def minimum_duration(shape: Shape) -> float:
    """The shortest duration the shape makes sense for (two ramps for `ramped`)."""
    return 2 * shape.param("ramp", 0.0) if shape.kind == "ramped" else 0.0
