"""Fit a curve to counts (binomial errors) or to simulated probabilities, with lmfit.

Counts k of n repetitions are fitted by weighted least squares with the binomial
standard error of each point, taken from the shrunk estimate p̃ = (k + ½)/(n + 1)
so that points at 0 or n counts keep a finite weight; the parameter uncertainties
are lmfit's, from the covariance of the fit scaled by the reduced χ² (lmfit's
default). For counts of a few per point a beta-binomial or a full binomial
likelihood would be better; this is the documented approximation.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import models


@dataclass(frozen=True)
class Fit:
    """A fitted curve: values and 1σ uncertainties of its parameters, and the goodness of fit."""

    model: str
    values: dict[str, float]
    errors: dict[str, float]
    chi2: float
    dof: int
    result: object  # the lmfit ModelResult, for plots and reports

    @property
    def reduced_chi2(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else float("nan")

    def describe(self, unit: str = "") -> str:
        lines = [f"{self.model} fit: chi2 = {self.chi2:.4g} for {self.dof} degrees of freedom"]
        for name, value in self.values.items():
            lines.append(f"  {name:10} {value:.6g} ± {self.errors[name]:.2g}")
        return "\n".join(lines)


def binomial_sigma(counts: np.ndarray, repetitions: np.ndarray) -> np.ndarray:
    """√(p̃(1−p̃)/n) with p̃ = (k + ½)/(n + 1)."""
    shrunk = (counts + 0.5) / (repetitions + 1.0)
    return np.sqrt(shrunk * (1 - shrunk) / repetitions)


def fit_counts(name: str, x, counts, repetitions, envelope: str = "gaussian") -> Fit:
    """Fit curve `name` to `counts` bright of `repetitions` at scanned values `x`."""
    counts, repetitions = np.asarray(counts, float), np.asarray(repetitions, float)
    return fit_values(name, x, counts / repetitions, binomial_sigma(counts, repetitions), envelope)


def fit_values(name: str, x, y, sigma=None, envelope: str = "gaussian") -> Fit:
    """Fit curve `name` to values `y` (with standard errors `sigma`, if known)."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    model, params = models.build(name, x, y, envelope)
    weights = None if sigma is None else 1.0 / np.maximum(np.asarray(sigma, float), 1e-12)
    result = model.fit(y, params, x=x, weights=weights)
    values = {k: float(p.value) for k, p in result.params.items()}
    errors = {k: float(p.stderr) if p.stderr is not None else float("nan") for k, p in result.params.items()}
    return Fit(name, values, errors, float(result.chisqr), int(result.nfree), result)
