"""Pulse envelopes: shape functions on [0, T] with peak 1, and their areas.

Areas ∫₀ᵀ f(t) dt are closed forms for every built-in shape, so a Gaussian
10⁴ times narrower than its window integrates as accurately as a wide one;
a shape without a closed form falls back to adaptive quadrature with its
peak and corners as break points. A pulse's area is 2π·f_Rabi·∫f dt.

What the AWG plays are samples at the drive's sample rate;
:func:`sampled_area_factor` integrates those (trapezoid rule, in chunks, never
holding more than :data:`CHUNK` samples), so the compiler can check that the
played waveform reproduces the area before any array is allocated.

numpy and scipy are imported where they are needed, not at import time (start-up speed).
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
CHUNK = 1 << 20  # samples integrated at a time


def envelope(shape: Shape, duration_s: float, t: np.ndarray | float) -> np.ndarray:
    """Envelope values (peak 1) at times t within [0, duration]."""
    import numpy as np
    t = np.asarray(t, dtype=float)
    if shape.kind == "square":
        return np.ones_like(t)
    if shape.kind == "gaussian":
        sigma = _sigma(shape, duration_s)
        return np.exp(-0.5 * ((t - duration_s / 2) / sigma) ** 2)  # σ² itself may overflow
    if shape.kind == "blackman":
        x = 2 * np.pi * t / duration_s
        return 0.42 - 0.5 * np.cos(x) + 0.08 * np.cos(2 * x)
    if shape.kind == "ramped":
        return _ramped(shape.param("ramp", 0.0), duration_s, t)
    raise ValueError(f"unknown shape {shape.kind}")


def _sigma(shape: Shape, duration_s: float) -> float:
    return shape.param("sigma", DEFAULT_GAUSSIAN_SIGMA_FRACTION * duration_s)


def _ramped(ramp: float, duration: float, t: np.ndarray) -> np.ndarray:
    """Flat top with sin² ramps of length `ramp` at both ends (common practice)."""
    import numpy as np
    if ramp <= 0:
        return np.ones_like(t)
    up = np.clip(t / ramp, 0.0, 1.0)
    down = np.clip((duration - t) / ramp, 0.0, 1.0)
    return np.sin(np.pi / 2 * np.minimum(up, down)) ** 2


def area_factor(shape: Shape, duration_s: float) -> float:
    """∫₀ᵀ f(t) dt in seconds for the envelope of peak 1."""
    if shape.kind == "square":
        return duration_s  # most pulses: answered before the cache hashes and compares the shape
    return _cached_area_factor(shape, duration_s)


@functools.lru_cache(maxsize=4096)
def _cached_area_factor(shape: Shape, duration_s: float) -> float:
    closed = _closed_form_area(shape, duration_s)
    return closed if closed is not None else _numeric_area(shape, duration_s)


def _closed_form_area(shape: Shape, duration: float) -> float | None:
    """The area of a built-in shape (derivations in tests/test_envelopes.py)."""
    if shape.kind == "square":
        return duration
    if shape.kind == "blackman":
        return 0.42 * duration  # the cosines integrate to zero over whole periods
    if shape.kind == "gaussian":
        sigma = _sigma(shape, duration)
        return sigma * math.sqrt(2 * math.pi) * math.erf(duration / (2 * math.sqrt(2) * sigma))
    if shape.kind == "ramped":
        ramp = shape.param("ramp", 0.0)
        if ramp <= 0:
            return duration
        if duration >= 2 * ramp:
            return duration - ramp  # each sin² ramp holds half its length
        # The ramps meet before reaching the top: 2·∫₀^{T/2} sin²(πt/2r) dt = (r/π)(u − sin u).
        u = math.pi * duration / (2 * ramp)
        u_minus_sin = u**3 / 6 * (1 - u**2 / 20 + u**4 / 840) if u < 1e-2 else u - math.sin(u)
        return ramp / math.pi * u_minus_sin
    return None


def _numeric_area(shape: Shape, duration: float) -> float:
    """Adaptive quadrature with the peak and the corners as break points (for new shapes)."""
    from scipy import integrate
    points = sorted({duration / 2, *(p for p in _corners(shape, duration) if 0 < p < duration)})
    value, _ = integrate.quad(lambda t: float(envelope(shape, duration, t)), 0.0, duration,
                              points=points, epsabs=0.0, epsrel=1e-12, limit=500)
    return value


def _corners(shape: Shape, duration: float) -> tuple[float, ...]:
    ramp = shape.param("ramp", 0.0)
    return (ramp, duration - ramp) if ramp > 0 else ()


def pulse_area(shape: Shape, duration_s: float, rabi_hz: float) -> float:
    """Rotation angle (rad) of a pulse: 2π·f_Rabi·∫f dt."""
    return 2 * math.pi * rabi_hz * area_factor(shape, duration_s)


def duration_for_area(shape: Shape, area_rad: float, rabi_hz: float) -> float:
    """The duration whose pulse area is `area_rad` at peak Rabi frequency `rabi_hz`."""
    target = area_rad / (2 * math.pi * rabi_hz)
    if not math.isfinite(target):
        raise OverflowError("the duration for this area is not a finite number")
    if shape.kind == "square":
        return target
    if _scales_with_duration(shape):
        return target / area_factor(shape, 1.0)
    if shape.kind == "ramped" and target >= shape.param("ramp", 0.0):
        return target + shape.param("ramp", 0.0)
    high = max(target, 1e-12)
    while area_factor(shape, high) < target:
        # A Gaussian of fixed σ never exceeds the area σ·sqrt(2π), however long it lasts.
        if high > 1e6 * target:
            raise ValueError(f"a {shape.kind} envelope with these parameters cannot reach this area")
        high *= 2
    from scipy import optimize
    return optimize.brentq(lambda T: area_factor(shape, T) - target, 0.0, high, xtol=1e-18, rtol=1e-13)


def _scales_with_duration(shape: Shape) -> bool:
    """True when the shape has no absolute time parameter, so its area is c·T."""
    return shape.kind == "blackman" or (shape.kind == "gaussian" and not shape.params)


def minimum_duration(shape: Shape) -> float:
    """The shortest duration the shape makes sense for (two ramps for `ramped`)."""
    return 2 * shape.param("ramp", 0.0) if shape.kind == "ramped" else 0.0


# ---- the played samples ----------------------------------------------------
def sample_count(duration_s: float, sample_rate_hz: float) -> int:
    """Samples of a waveform over [0, T], both ends included (as waveforms.npz holds them)."""
    return max(2, int(round(duration_s * sample_rate_hz)) + 1)


@functools.lru_cache(maxsize=4096)
def sampled_area_factor(shape: Shape, duration_s: float, sample_rate_hz: float) -> float:
    """∫f dt of the played samples (trapezoid rule over :func:`sample_count` points)."""
    import numpy as np
    count = sample_count(duration_s, sample_rate_hz)
    step = duration_s / (count - 1)
    total, ends = 0.0, 0.0
    for first in range(0, count, CHUNK):
        k = np.arange(first, min(count, first + CHUNK), dtype=float)
        values = envelope(shape, duration_s, k * step)
        total += float(values.sum())
        if first == 0:
            ends += float(values[0])
        if first + CHUNK >= count:
            ends += float(values[-1])
    return step * (total - ends / 2)
