"""`seqlang plot --what populations|correlators`: simulated results as figures."""
from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ..sim import observables  # noqa: E402
from ..sim.model import LEVELS  # noqa: E402
from .timeline import _save  # noqa: E402


def plot_results(sequence, what: str, path: str) -> None:
    """Draw level populations against time, or predicted and ideal correlators."""
    from ..sim.api import simulate
    result = simulate(sequence, history=(what == "populations"))
    fig = _populations(result) if what == "populations" else _correlators(result)
    _save(fig, path)


def _populations(result):
    rows = [(c, name, i) for c in result.clusters for i, name in enumerate(c.model.sites)]
    fig, axes = plt.subplots(len(rows), 1, figsize=(9, 1.9 * len(rows) + 0.8), sharex=True, squeeze=False)
    for ax, (cluster, name, i) in zip(axes[:, 0], rows):
        times = np.array([0.0] + [t for t, _ in cluster.history]) * 1e6
        first = np.zeros(len(LEVELS))
        first[0] = 1.0
        pops = np.array([first] + [p[i] for _, p in cluster.history])
        for level, label in enumerate(LEVELS):
            ax.step(times, pops[:, level], where="post", label=f"|{label}>")
        ax.set_ylabel(name)
        ax.set_ylim(-0.05, 1.05)
    axes[0, 0].legend(loc="upper right", ncol=len(LEVELS), fontsize="small")
    axes[-1, 0].set_xlabel("time (us)")
    fig.suptitle(f"{result.program_name}: level populations (played timeline)")
    fig.tight_layout()
    return fig


def _correlators(result):
    pairs = [e for e in result.expectations if "correlators" in e]
    fig, axes = plt.subplots(max(1, len(pairs)), 1, figsize=(8, 3.2 * max(1, len(pairs))), squeeze=False)
    keys = [a + b for a in "XYZ" for b in "XYZ"]
    for ax, e in zip(axes[:, 0], pairs):
        state = e["state"].strip("|>")
        ideal = observables.ideal_correlators(state, e["state"].startswith("|"))
        x = np.arange(len(keys))
        ax.bar(x - 0.2, [ideal[k] for k in keys], 0.4, label="ideal", color="0.7")
        ax.bar(x + 0.2, [e["correlators"][k] for k in keys], 0.4, label="predicted")
        ax.set_xticks(x, keys)
        ax.set_ylim(-1.1, 1.1)
        ax.axhline(0, color="black", linewidth=0.6)
        ax.set_title(f"{', '.join(e['sites'])} vs {e['state']}: fidelity {e['fidelity']:.4f}")
        ax.legend(fontsize="small")
    if not pairs:
        axes[0, 0].text(0.5, 0.5, "no two-site `expect` in this program", ha="center", va="center")
    fig.tight_layout()
    return fig
