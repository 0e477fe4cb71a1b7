"""Measured counts laid over a simulated scan, with the fitted curve."""
from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from .scans import _label, _png  # noqa: E402
from ..emit.atomic import write_bytes  # noqa: E402


def plot_overlay(ds, x, measured, record: str, fit, path: str) -> None:
    """Measured P(bright) with binomial error bars, the simulated curve and the fit."""
    from ..fit.fitting import binomial_sigma
    counts, n = measured.counts[record], measured.repetitions
    dim = next(iter(ds.sizes))
    figure, axes = plt.subplots(figsize=(6.4, 4.2), constrained_layout=True)
    axes.errorbar(x, counts / n, yerr=binomial_sigma(counts, n), fmt="o", ms=3, capsize=2, color="k",
                  label="measured")
    if record in ds:
        axes.plot(ds[dim].values, ds[record].values, "-", lw=1.2, label="simulated")
    if fit is not None:
        grid = np.linspace(np.min(x), np.max(x), 400)
        axes.plot(grid, fit.curve(grid), "--", lw=1.2, label=f"{fit.model} fit ({fit.likelihood})")
    axes.set_xlabel(_label(ds[dim]))
    axes.set_ylabel(f"{record}")
    axes.grid(alpha=0.3)
    axes.legend(fontsize=8)
    write_bytes(path, _png(figure))
    plt.close(figure)
