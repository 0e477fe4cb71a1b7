"""The error-budget chart: which noise source costs the most fidelity.

Per expected state, on a logarithmic infidelity axis: the all-sources total
and the noiseless baseline (the model's own gate error) at the top, set apart;
then every declared source, sorted, as the infidelity it adds to the baseline
when it acts alone (1 − F with that source, minus the baseline); sources the
rig does not declare are listed as "not declared", never drawn as zero.

The optional "what if" panel shows, per source, the all-sources infidelity
estimated with that source's added infidelity halved: total − ½·added. This is
a first-order estimate (it treats contributions as additive), not a new
simulation; it says where halving a noise would help most.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..sim.noise import MARKOVIAN
from . import style

MARKOVIAN_COLOUR, SAMPLED_COLOUR = "#1F5A9E", "#D4820F"


@dataclass(frozen=True)
class BudgetRow:
    """One row of the chart and of the report's table."""

    name: str
    label: str
    value: float | None  # infidelity drawn (None: not declared)
    error: float
    kind: str  # "total", "baseline", "markovian", "sampled", "undeclared"
    note: str = ""
    what_if: float | None = None  # total with this source's added infidelity halved


def budget_rows(entry: dict, not_declared: dict[str, str]) -> list[BudgetRow]:
    """Rows in drawing order (top first): total, baseline, sources by added infidelity, undeclared."""
    infidelity, errors = entry["infidelity"], entry.get("error", {})
    base, total = infidelity.get("none", 0.0), infidelity.get("all", 0.0)
    rows = [BudgetRow("all", "all sources", total, errors.get("all", 0.0), "total"),
            BudgetRow("none", "noiseless (gate error of the model)", base, errors.get("none", 0.0), "baseline")]
    sources = [n for n in infidelity if n not in ("all", "none")]
    declared = [n for n in sources if n not in not_declared]
    added = {n: infidelity[n] - base for n in declared}
    for name in sorted(declared, key=lambda n: (-added[n], n)):
        kind = "markovian" if name in MARKOVIAN else "sampled"
        rows.append(BudgetRow(name, name, added[name], errors.get(name, 0.0), kind,
                              what_if=total - 0.5 * max(added[name], 0.0)))
    for name in sorted(set(sources) & set(not_declared)):
        rows.append(BudgetRow(name, name, None, 0.0, "undeclared", note=not_declared[name]))
    return rows


def budget_figure(numbers: dict, what_if: bool = False):
    """One panel per expectation (and a "what if" panel beside each when asked)."""
    import matplotlib.pyplot as plt
    entries = numbers.get("expectations") or []
    count = max(1, len(entries))
    height = sum(0.32 * (len(e["infidelity"]) + 1) + 1.3 for e in entries) if entries else 2.5
    columns = 2 if what_if else 1
    fig, axes = plt.subplots(count, columns, figsize=(11 if what_if else 8.5, height), squeeze=False,
                             layout="constrained", gridspec_kw={"width_ratios": [3, 2] if what_if else [1]})
    undeclared = numbers.get("not_declared", {})
    for k, entry in enumerate(entries):
        rows = budget_rows(entry, undeclared)
        _budget_panel(axes[k, 0], entry, rows)
        if what_if:
            _what_if_panel(axes[k, 1], rows)
    if not entries:
        axes[0, 0].text(0.5, 0.5, "no `expect` in this program: nothing to budget", ha="center", va="center")
        axes[0, 0].set_axis_off()
    engines = ", ".join(numbers.get("engines", []))
    fig.suptitle(f"{numbers.get('program', '')}: error budget ({numbers.get('shots')} shots for sampled noise, "
                 f"seed {numbers.get('seed')}; engine {engines})", fontsize=9.5, x=0.01, ha="left")
    return fig


def _budget_panel(ax, entry: dict, rows: list[BudgetRow]) -> None:
    y = np.arange(len(rows))
    drawn = [r for r in rows if r.value is not None and r.value > 0]
    low = min((r.value for r in drawn), default=1e-6) / 4
    high = max((r.value for r in drawn), default=1e-3) * 4
    ax.set_xscale("log")
    ax.set_xlim(low, high)
    for i, row in enumerate(rows):
        _draw_row(ax, i, row, low)
    ax.set_yticks(y, [r.label for r in rows], fontsize=8)
    ax.set_ylim(len(rows) - 0.5, -0.6)
    ax.axhline(1.5, color="#888888", linewidth=0.8)
    ax.set_xlabel("infidelity 1 − F (log scale); sources: added to the noiseless baseline, acting alone",
                  fontsize=8)
    ax.set_title(f"{', '.join(entry['sites'])} as {entry['state']}", fontsize=9, loc="left")
    ax.grid(axis="x", which="major", color="#EEEEEE", linewidth=0.6)
    ax.set_axisbelow(True)
    ax.legend(handles=_handles(rows), fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=2,
              frameon=False)


def _draw_row(ax, i: int, row: BudgetRow, low: float) -> None:
    colours = {"total": style.INK, "baseline": style.BASELINE_COLOUR, "markovian": MARKOVIAN_COLOUR,
               "sampled": SAMPLED_COLOUR}
    if row.value is None:
        ax.text(low * 1.15, i, f"not declared — {row.note}", va="center", fontsize=7.5, color="#666666",
                style="italic")
        return
    if row.value <= 0:
        ax.text(low * 1.15, i, f"no effect resolved (≤ {max(row.error, 0):.1g})", va="center", fontsize=7.5,
                color="#666666")
        return
    lower = min(row.error, row.value * 0.999)  # a log axis cannot go below zero
    ax.barh(i, row.value, left=low, height=0.62, color=colours[row.kind],
            edgecolor="#777777" if row.kind == "baseline" else "none",
            xerr=[[lower], [row.error]] if row.error else None,
            error_kw={"elinewidth": 1.0, "capsize": 2.5, "ecolor": "#333333"})
    ax.text((row.value + row.error) * 1.12, i, f"{row.value:.2e}", va="center", fontsize=7, color="#333333")


def _handles(rows: list[BudgetRow]) -> list:
    from matplotlib.patches import Patch
    kinds = {r.kind for r in rows}
    out = [Patch(color=style.INK, label="all sources together"),
           Patch(facecolor=style.BASELINE_COLOUR, edgecolor="#777777", label="noiseless baseline")]
    if "markovian" in kinds:
        out.append(Patch(color=MARKOVIAN_COLOUR, label="Lindblad (Markovian) source"))
    if "sampled" in kinds:
        out.append(Patch(color=SAMPLED_COLOUR, label="sampled per shot"))
    return out


def _what_if_panel(ax, rows: list[BudgetRow]) -> None:
    total = rows[0].value or 0.0
    values = [r.what_if for r in rows]
    shown = [v for v in values if v is not None]
    span = max([total - v for v in shown] + [total * 0.02, 1e-12])
    for i, (row, value) in enumerate(zip(rows, values)):
        if value is not None and row.value and row.value > 0:
            ax.barh(i, total - value, left=value, height=0.5, color="#DDDDDD", edgecolor="#555555")
            ax.plot([value], [i], marker="<", color=MARKOVIAN_COLOUR if row.kind == "markovian" else SAMPLED_COLOUR)
    ax.axvline(total, color=style.INK, linewidth=1.0)
    ax.set_xlim(total - 1.25 * span, total + 0.1 * span)
    ax.set_ylim(len(rows) - 0.5, -0.6)
    ax.set_yticks(np.arange(len(rows)), [""] * len(rows))
    ax.set_xlabel("what if: all-sources infidelity with this source halved\n(first-order estimate)", fontsize=8)
    from matplotlib.ticker import FuncFormatter, MaxNLocator
    ax.xaxis.set_major_locator(MaxNLocator(4))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:.3g}"))
