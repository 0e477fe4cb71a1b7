"""Figures of a scan's result store: the reported numbers against one scanned parameter
(with error bars), or maps over two; axes are labelled in the units the scan was written in.

Related numbers share a figure (the populations of one expectation, the levels of one
site, the P(bright) of one record), so a scan gives a handful of files, not dozens.
"""
from __future__ import annotations

import math
import os
import re

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from ..emit.atomic import write_bytes  # noqa: E402

BOOKKEEPING = ("point_index", "point_seed", "point_done")
_FAMILIES = ((r"P[01]+_(.+)", "populations_{}"), (r"level_[^_]+_(.+)", "levels_{}"),
             (r"(?:rydberg|loss)_(.+)", "rydberg_loss_{}"), (r"bright_(.+?)_[^_]+", "bright_{}"),
             (r"(.+)", "{}"))


def reported(ds) -> list[str]:
    """The variables worth drawing: numbers, not their errors or the bookkeeping."""
    return sorted(n for n in ds.data_vars if n not in BOOKKEEPING and not n.endswith("_error"))


def families(names: list[str]) -> dict[str, list[str]]:
    """Figure name → the numbers drawn in it."""
    out: dict[str, list[str]] = {}
    for name in names:
        for pattern, figure in _FAMILIES:
            match = re.fullmatch(pattern, name)
            if match:
                out.setdefault(figure.format(match.group(1)), []).append(name)
                break
    return out


def plot_store(ds, directory: str) -> list[str]:
    """One PNG per family of reported numbers in `directory`; returns the paths written."""
    os.makedirs(directory, exist_ok=True)
    written = []
    for figure_name, names in families([n for n in reported(ds) if ds[n].dims]).items():
        path = os.path.join(directory, f"{figure_name}.png")
        figure = plot_family(ds, figure_name, names)
        write_bytes(path, _png(figure))
        plt.close(figure)
        written.append(path)
    return written


def plot_family(ds, title: str, names: list[str]):
    """Error bars over one dimension (one line per number), or one map per number over two."""
    rest = list(ds[names[0]].dims[2:])
    held = {d: 0 for d in rest}
    if len(ds[names[0]].dims) == 1:
        figure, axes = plt.subplots(figsize=(6.4, 4.2), constrained_layout=True)
        _lines(ds, names, axes)
    else:
        cols = min(len(names), 3)
        rows = math.ceil(len(names) / cols)
        figure, grid = plt.subplots(rows, cols, figsize=(4.4 * cols, 3.6 * rows), squeeze=False,
                                    constrained_layout=True)
        for axes, name in zip(grid.ravel(), names):
            _map(ds[name].isel(held).load(), axes)
        for axes in grid.ravel()[len(names):]:
            axes.set_visible(False)
    figure.suptitle(title + (" at " + ", ".join(f"{d} = {ds[d].values[0]:g}" for d in rest) if rest else ""),
                    fontsize=10)
    return figure


def _lines(ds, names: list[str], axes) -> None:
    x = ds[ds[names[0]].dims[0]]
    for name in names:
        error = ds.get(f"{name}_error")
        axes.errorbar(x.values, ds[name].values, yerr=None if error is None else error.values,
                      fmt="o-", ms=3, capsize=2, lw=1, label=name)
    axes.set_xlabel(_label(x))
    axes.set_ylabel(_label(ds[names[0]]) if len(names) == 1 else "probability")
    axes.set_xscale("log" if x.attrs.get("spacing") == "log" else "linear")
    axes.grid(alpha=0.3)
    if len(names) > 1:
        axes.legend(fontsize=8)


def _map(var, axes) -> None:
    y, x = var[var.dims[0]], var[var.dims[1]]
    mesh = axes.pcolormesh(x.values, y.values, var.values, shading="nearest")
    axes.figure.colorbar(mesh, ax=axes)
    axes.set_title(str(var.name), fontsize=9)
    axes.set_xlabel(_label(x))
    axes.set_ylabel(_label(y))
    for coord, setter in ((x, axes.set_xscale), (y, axes.set_yscale)):
        setter("log" if coord.attrs.get("spacing") == "log" else "linear")


def _label(coord) -> str:
    units = coord.attrs.get("units", "")
    name = coord.attrs.get("long_name", coord.name)
    return f"{name} [{units}]" if units and units != "1" else str(name)


def _png(figure) -> bytes:
    import io
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=100, metadata={"Software": None})
    return buffer.getvalue()


__all__ = ["families", "plot_family", "plot_store", "reported"]
