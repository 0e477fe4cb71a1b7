"""The standard calibration curves as lmfit models, with starting guesses from the data.

Every model is a probability (or a frequency, for `sqrt_n`) against the scanned value,
in the scan's own unit (times in the unit the scan was written in, e.g. us, so a
fitted frequency comes out in 1/us = MHz). Formulas:

* `rabi`: P = offset + contrast/2 · (1 − e^(−damping·x) · cos(2π·frequency·x + phase))
  (damped Rabi oscillation; Rabi formula on resonance, Foot, Atomic Physics, OUP 2005)
* `ramsey`: P = offset + contrast/2 · (1 + env(x) · cos(2π·detuning·x + phase)), with
  env = exp(−(x/t2)²) (`gaussian`, Doppler-like dephasing) or exp(−x/t2) (`exponential`)
* `resonance`: P = offset + amplitude / (1 + ((x − centre)/(fwhm/2))²) (Lorentzian line)
* `blockade`: y = far + (near − far) / (1 + (x/radius)^12) — the blockade fails as
  (Ω/V)² ∝ R¹² outside the blockade radius R_b = (C6/hΩ)^(1/6) (common practice)
* `sqrt_n`: f = single · N^exponent — the collective √N enhancement has exponent ½
  (Gaëtan et al., Nat. Phys. 5, 115 (2009); Urban et al., Nat. Phys. 5, 110 (2009))
"""
from __future__ import annotations

import numpy as np

MODELS = ("rabi", "ramsey", "resonance", "blockade", "sqrt_n")
PROBABILITIES = ("rabi", "ramsey", "resonance", "blockade")  # curves of a probability (binomial likelihood)


def rabi(x, frequency, contrast, offset, damping, phase):
    return offset + contrast / 2 * (1 - np.exp(-damping * x) * np.cos(2 * np.pi * frequency * x + phase))


def ramsey_gaussian(x, detuning, t2, contrast, offset, phase):
    return offset + contrast / 2 * (1 + np.exp(-(x / t2) ** 2) * np.cos(2 * np.pi * detuning * x + phase))


def ramsey_exponential(x, detuning, t2, contrast, offset, phase):
    return offset + contrast / 2 * (1 + np.exp(-x / t2) * np.cos(2 * np.pi * detuning * x + phase))


def resonance(x, centre, fwhm, amplitude, offset):
    return offset + amplitude / (1 + ((x - centre) / (fwhm / 2)) ** 2)


def blockade(x, radius, near, far):
    return far + (near - far) / (1 + (x / radius) ** 12)


def sqrt_n(x, single, exponent):
    return single * x ** exponent


def function(name: str, envelope: str = "gaussian"):
    """The curve's function f(x, **parameters)."""
    if name == "ramsey":
        return ramsey_gaussian if envelope == "gaussian" else ramsey_exponential
    return {"rabi": rabi, "resonance": resonance, "blockade": blockade, "sqrt_n": sqrt_n}[name]


def build(name: str, x: np.ndarray, y: np.ndarray, envelope: str = "gaussian"):
    """The lmfit Model and its starting Parameters for curve `name`."""
    import lmfit
    make = {"rabi": _rabi, "ramsey": _ramsey, "resonance": _resonance, "blockade": _blockade,
            "sqrt_n": _sqrt_n}[name]
    return make(lmfit, np.asarray(x, float), np.asarray(y, float), envelope)


def _dominant_frequency(x, y) -> float:
    """The strongest Fourier component of evenly resampled data (a starting guess)."""
    grid = np.linspace(x.min(), x.max(), max(len(x), 16))
    values = np.interp(grid, x, y) - np.mean(y)
    spectrum = np.abs(np.fft.rfft(values * np.hanning(len(grid))))
    frequencies = np.fft.rfftfreq(len(grid), grid[1] - grid[0])
    return float(frequencies[1:][np.argmax(spectrum[1:])]) if len(frequencies) > 1 else 1.0 / np.ptp(x)


def _rabi(lmfit, x, y, envelope):
    model = lmfit.Model(rabi)
    span = float(np.ptp(x)) or 1.0
    # Starting phase: 0 if the curve starts low (excitation), π if it starts high (survival).
    phase = 0.0 if y[np.argmin(x)] < np.mean(y) else np.pi
    # No bounds but on the frequency: a parameter held at a bound (contrast 1, no damping)
    # would distort its uncertainty, and these are what the fits are for.
    params = model.make_params(frequency=_dominant_frequency(x, y), contrast=float(np.ptp(y)) or 1.0,
                               offset=float(y.min()), damping=0.1 / span, phase=phase)
    params["frequency"].min = 0
    return model, params


def _ramsey(lmfit, x, y, envelope):
    model = lmfit.Model(ramsey_gaussian if envelope == "gaussian" else ramsey_exponential)
    span = float(np.ptp(x)) or 1.0
    params = model.make_params(detuning=_dominant_frequency(x, y), t2=span, contrast=float(np.ptp(y)) or 1.0,
                               offset=float(y.min()), phase=0.0)
    params["t2"].min = span / 100
    return model, params


def _resonance(lmfit, x, y, envelope):
    model = lmfit.Model(resonance)
    peak = int(np.argmax(y))
    half = x[y >= (y.max() + y.min()) / 2]
    params = model.make_params(centre=float(x[peak]), fwhm=float(np.ptp(half)) or float(np.ptp(x)) / 10,
                               amplitude=float(np.ptp(y)), offset=float(y.min()))
    params["fwhm"].min = 0
    return model, params


def _blockade(lmfit, x, y, envelope):
    model = lmfit.Model(blockade)
    middle = (y.max() + y.min()) / 2
    crossing = float(x[np.argmin(np.abs(y - middle))])
    params = model.make_params(radius=crossing, near=float(y[np.argmin(x)]), far=float(y[np.argmax(x)]))
    params["radius"].min = 0
    return model, params


def _sqrt_n(lmfit, x, y, envelope):
    model = lmfit.Model(sqrt_n)
    params = model.make_params(single=float(y[np.argmin(x)] / max(x.min(), 1)), exponent=0.5)
    return model, params
