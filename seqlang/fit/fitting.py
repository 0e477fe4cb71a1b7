"""Fit a curve to counts k of n repetitions, or to simulated probabilities, with lmfit.

Two likelihoods for counts, named in every fit's output:

* `least_squares` — weighted least squares with the binomial standard error of each
  point, taken from the shrunk estimate p̃ = (k + ½)/(n + 1) so that points at 0 or n
  counts keep a finite weight; the uncertainties are lmfit's, from the covariance
  scaled by the reduced χ² (lmfit's default). The Gaussian approximation of the
  binomial: good for tens of counts per point and more.
* `binomial` — the maximum-likelihood fit: minimise −Σ log Binom(k; n, p(x)). lmfit
  minimises the sum of squared deviance residuals, which is 2·(that negative
  log-likelihood) up to a constant, so the optimum is the likelihood's; the 1σ
  uncertainties are the square roots of the diagonal of the inverse Hessian of the
  negative log-likelihood at the optimum (observed Fisher information; Hessian by
  `scipy.differentiate.hessian`), not scaled by any χ².

`auto` (the default) takes `binomial` when some point has fewer than
`SMALL_COUNTS` repetitions, else `least_squares`.

>>> fit_counts("rabi", t, k, n, likelihood="binomial").errors["frequency"]  # doctest: +SKIP
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import models

LIKELIHOODS = ("auto", "binomial", "least_squares")
SMALL_COUNTS = 50  # below this many repetitions at a point, `auto` takes the binomial likelihood
_EDGE = 1e-12  # a model probability is held inside [_EDGE, 1 − _EDGE] in the likelihood
_OUTSIDE_WEIGHT = 1e3  # residual per unit of probability by which a curve leaves [0, 1]


@dataclass(frozen=True)
class Fit:
    """A fitted curve: values and 1σ uncertainties of its parameters, and the goodness of fit."""

    model: str
    values: dict[str, float]
    errors: dict[str, float]
    chi2: float  # Pearson χ² of the data against the fitted curve
    dof: int
    likelihood: str  # `least_squares`, `binomial`, or `values` (a fit to values with given errors)
    envelope: str = "gaussian"

    @property
    def reduced_chi2(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else float("nan")

    def curve(self, x) -> np.ndarray:
        """The fitted curve at `x`."""
        return models.function(self.model, self.envelope)(np.asarray(x, float), **self.values)

    def describe(self) -> str:
        lines = [f"{self.model} fit ({LIKELIHOOD_WORDS[self.likelihood]}): chi2 = {self.chi2:.4g} for "
                 f"{self.dof} degrees of freedom"]
        for name, value in self.values.items():
            lines.append(f"  {name:10} {value:.6g} ± {self.errors[name]:.2g}")
        return "\n".join(lines)


LIKELIHOOD_WORDS = {"binomial": "binomial maximum likelihood, errors from the inverse Hessian",
                    "least_squares": "weighted least squares, binomial error bars",
                    "values": "least squares"}


def binomial_sigma(counts: np.ndarray, repetitions: np.ndarray) -> np.ndarray:
    """√(p̃(1−p̃)/n) with p̃ = (k + ½)/(n + 1)."""
    shrunk = (counts + 0.5) / (repetitions + 1.0)
    return np.sqrt(shrunk * (1 - shrunk) / repetitions)


def choose_likelihood(likelihood: str, repetitions) -> str:
    """`auto` → `binomial` where some point has fewer than SMALL_COUNTS repetitions."""
    if likelihood not in LIKELIHOODS:
        raise ValueError(f"unknown likelihood `{likelihood}` (choose {', '.join(LIKELIHOODS)})")
    if likelihood != "auto":
        return likelihood
    return "binomial" if np.min(repetitions) < SMALL_COUNTS else "least_squares"


def fit_counts(name: str, x, counts, repetitions, envelope: str = "gaussian", likelihood: str = "auto") -> Fit:
    """Fit curve `name` to `counts` bright of `repetitions` at scanned values `x`."""
    x = np.asarray(x, float)
    counts = np.asarray(counts, float)
    repetitions = np.broadcast_to(np.asarray(repetitions, float), counts.shape)
    method = choose_likelihood(likelihood, repetitions)
    if method == "binomial" and name not in models.PROBABILITIES:
        raise ValueError(f"a {name} curve is not a probability: fit it with least squares")
    model, params = models.build(name, x, counts / repetitions, envelope)
    result = model.fit(counts / repetitions, params, x=x, weights=1 / binomial_sigma(counts, repetitions))
    if method == "binomial":
        return _binomial(name, envelope, result.params, x, counts, repetitions)
    return _from_lmfit(name, envelope, result, "least_squares", _pearson(name, envelope, result.params, x,
                                                                         counts, repetitions))


def fit_values(name: str, x, y, sigma=None, envelope: str = "gaussian") -> Fit:
    """Fit curve `name` to values `y` (with standard errors `sigma`, if known)."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    model, params = models.build(name, x, y, envelope)
    weights = None if sigma is None else 1.0 / np.maximum(np.asarray(sigma, float), 1e-12)
    result = model.fit(y, params, x=x, weights=weights)
    return _from_lmfit(name, envelope, result, "values", float(result.chisqr))


def _from_lmfit(name, envelope, result, likelihood, chi2) -> Fit:
    values = {k: float(p.value) for k, p in result.params.items()}
    errors = {k: float(p.stderr) if p.stderr is not None else float("nan") for k, p in result.params.items()}
    return Fit(name, values, errors, chi2, int(result.nfree), likelihood, envelope)


def _pearson(name, envelope, params, x, counts, repetitions) -> float:
    p = np.clip(models.function(name, envelope)(x, **params.valuesdict()), _EDGE, 1 - _EDGE)
    return float(np.sum((counts - repetitions * p) ** 2 / (repetitions * p * (1 - p))))


def _binomial(name, envelope, start, x, counts, repetitions) -> Fit:
    """Maximum likelihood from the least-squares optimum `start`; errors from the inverse Hessian."""
    import lmfit
    from scipy.special import xlogy
    function = models.function(name, envelope)

    def deviance(params):
        raw = function(x, **params.valuesdict())
        p = np.clip(raw, _EDGE, 1 - _EDGE)
        expected = repetitions * p
        terms = xlogy(counts, counts / expected) + xlogy(repetitions - counts, (repetitions - counts)
                                                         / (repetitions - expected))
        # A curve outside [0, 1] is pushed back (the clipped likelihood alone is flat out there).
        outside = _OUTSIDE_WEIGHT * np.sqrt(repetitions) * (raw - p)
        return np.concatenate([np.sign(counts - expected) * np.sqrt(np.maximum(2 * terms, 0.0)), outside])

    result = lmfit.minimize(deviance, start.copy(), method="leastsq", scale_covar=False)
    names = [k for k, p in result.params.items() if p.vary]
    best = np.array([result.params[k].value for k in names])
    errors = _inverse_hessian_errors(function, names, best, _scales(result, names, best), x, counts, repetitions)
    values = {k: float(p.value) for k, p in result.params.items()}
    return Fit(name, values, dict(zip(names, errors)), _pearson(name, envelope, result.params, x, counts,
                                                                 repetitions),
               int(len(x) - len(names)), "binomial", envelope)


def _scales(result, names, best) -> np.ndarray:
    """Step scales for the Hessian: the Gauss–Newton errors where known, else the values."""
    scales = np.array([result.params[k].stderr or 0.0 for k in names], float)
    fallback = np.maximum(np.abs(best) * 1e-3, 1e-6)
    return np.where(np.isfinite(scales) & (scales > 0), scales, fallback)


def _inverse_hessian_errors(function, names, best, scales, x, counts, repetitions) -> np.ndarray:
    """√diag(H⁻¹) of the negative log-likelihood, H taken in units of `scales` (well conditioned)."""
    from scipy.differentiate import hessian
    from scipy.stats import binom

    def nll(u):  # u: (parameters, ...) in units of `scales` around `best`
        extra = (1,) * (u.ndim - 1)
        theta = best.reshape((-1,) + extra) + scales.reshape((-1,) + extra) * u
        shape = (-1,) + extra
        p = function(x.reshape(shape), **{k: theta[i][None] for i, k in enumerate(names)})
        p = np.clip(p, _EDGE, 1 - _EDGE)
        return -np.sum(binom.logpmf(counts.reshape(shape), repetitions.reshape(shape), p), axis=0)

    h = hessian(nll, np.zeros(len(names)), initial_step=0.5, order=4, maxiter=2).ddf
    try:
        covariance = np.linalg.inv(h)
    except np.linalg.LinAlgError:
        return np.full(len(names), np.nan)
    diagonal = np.diag(covariance)
    return np.where(diagonal > 0, np.sqrt(np.abs(diagonal)), np.nan) * scales
