"""Figures of a scan's result store: each number against one scanned parameter (with error
bars), or a map over two. Axes are labelled in the units the scan was written in.
"""
from __future__ import annotations

import os

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ..emit.atomic import write_bytes  # noqa: E402

BOOKKEEPING = ("point_index", "point_seed", "point_done")


def reported(ds) -> list[str]:
    """The variables worth a figure: numbers, not their errors or the bookkeeping."""
    return sorted(n for n in ds.data_vars if n not in BOOKKEEPING and not n.endswith("_error"))


def plot_store(ds, directory: str, names: list[str] | None = None) -> list[str]:
    """One PNG per reported variable in `directory`; returns the paths written."""
    os.makedirs(directory, exist_ok=True)
    written = []
    for name in names or reported(ds):
        if not ds[name].dims:
            continue
        path = os.path.join(directory, f"{name}.png")
        figure = plot_variable(ds, name)
        write_bytes(path, _png(figure))
        plt.close(figure)
        written.append(path)
    return written


def plot_variable(ds, name: str):
    """A figure of `name`: error bars over one dimension, a colour map over two."""
    var, rest = _slice(ds[name])
    error = ds.get(f"{name}_error")
    figure, axes = plt.subplots(figsize=(6.4, 4.2), constrained_layout=True)
    if var.ndim == 1:
        x = var[var.dims[0]]
        err = error.isel({d: 0 for d in rest}).values if error is not None else None
        axes.errorbar(x.values, var.values, yerr=err, fmt="o-", ms=3, capsize=2, lw=1)
        axes.set_xlabel(_label(x))
        axes.set_ylabel(_label(var))
        axes.set_xscale("log" if x.attrs.get("spacing") == "log" else "linear")
        axes.grid(alpha=0.3)
    else:
        y, x = var[var.dims[0]], var[var.dims[1]]
        mesh = axes.pcolormesh(x.values, y.values, var.values, shading="nearest")
        figure.colorbar(mesh, ax=axes, label=_label(var))
        axes.set_xlabel(_label(x))
        axes.set_ylabel(_label(y))
    title = name + (" at " + ", ".join(f"{d} = {ds[d].values[0]:g}" for d in rest) if rest else "")
    axes.set_title(title, fontsize=10)
    return figure


def _slice(var):
    """At most two dimensions: the others are held at their first value (said in the title)."""
    rest = list(var.dims[2:])
    return var.isel({d: 0 for d in rest}).load(), rest


def _label(coord) -> str:
    units = coord.attrs.get("units", "")
    name = coord.attrs.get("long_name", coord.name)
    return f"{name} [{units}]" if units and units != "1" else str(name)


def _png(figure) -> bytes:
    import io
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=110, metadata={"Software": None})
    return buffer.getvalue()


__all__ = ["plot_store", "plot_variable", "reported"]
