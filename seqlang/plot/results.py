"""`seqlang plot --what populations|correlators`: simulated results as figures.

Both figures say which noise was simulated (sources, shots, seed) and draw the
ideal target beside the prediction. Error bars and bands are ±1σ projection
noise for the number of repetitions N of the experiment (N = the simulation's
`repetitions`): √(p(1−p)/N) for a population, √((1−c²)/N) for a correlator c
(outcomes ±1). With a single noiseless evaluation (N = 1) none are drawn.
"""
from __future__ import annotations

import math

import numpy as np

from ..sim import observables
from ..sim.model import LEVELS
from . import style
from .axis import shade_compressed
from .save import save_png

LEVEL_STYLES = {  # colour and line style both differ, for print and for colour-blind readers
    0: ("#1F5A9E", "-"),
    1: ("#D4820F", "--"),
    2: ("#7A1F5C", ":"),
    3: ("#7F7F7F", "-."),
}
CORRELATORS = tuple(a + b for a in "XYZ" for b in "XYZ")


def repetitions(result) -> int:
    """The N behind the error bars: repetitions of the experiment the numbers stand for."""
    return int((getattr(result, "noise", None) or {}).get("repetitions", 1) or 1)


def noise_caption(result) -> str:
    """One line: which noise, how many shots, which seed, how many repetitions."""
    info = getattr(result, "noise", None) or {}
    sources = info.get("sources") or []
    from ..sim.noise import SOURCES
    text = ("noiseless model" if not sources else "noise: all sources" if set(sources) >= set(SOURCES)
            else "noise: " + ", ".join(sources))
    if info.get("shots", 1) > 1:
        text += f"; {info['shots']} shots, seed {info.get('seed')}"
    n = repetitions(result)
    text += f"; error bars ±1σ for N = {n} repetitions" if n > 1 else "; no error bars (single evaluation)"
    return text


def _title(fig, text: str) -> None:
    import textwrap
    fig.suptitle("\n".join(textwrap.wrap(text, 120)), fontsize=9.5, x=0.01, ha="left")


def plot_results(sequence, what: str, path: str, piecewise: bool = True, **options) -> None:
    """Simulate `sequence` with `options` (noise, shots, seed, …) and draw `what` into `path`."""
    from ..sim.api import simulate
    result = simulate(sequence, history=(what == "populations"), **options)
    if what == "populations":
        fig = populations_figure(result, sequence, piecewise)
    else:
        fig = correlators_figure(result)
    save_png(fig, path)


# ---- populations -----------------------------------------------------------------
def populations_figure(result, sequence, piecewise: bool = True):
    """Level populations of every site against the played time, one panel per site."""
    import matplotlib.pyplot as plt
    from .timeline import timeline_axis
    rows = [(c, name, i) for c in result.clusters for i, name in enumerate(c.model.sites)]
    fig, axes = plt.subplots(len(rows), 1, figsize=(10, 1.9 * len(rows) + 1.3), sharex=True, squeeze=False,
                             layout="constrained")
    axis = timeline_axis(sequence.checked, piecewise)
    unit = style.time_unit(sequence.played.duration_s)
    n = repetitions(result)
    ideal = _ideal_site_populations(result)
    for ax, (cluster, name, i) in zip(axes[:, 0], rows):
        axis.apply(ax)
        shade_compressed(ax, axis)
        _pulse_markers(ax, sequence, name)
        _draw_levels(ax, cluster, i, n)
        _draw_ideal(ax, ideal.get(name), sequence.played.duration_s)
        species = sequence.program.sites[name].species
        ax.set_ylabel("population", fontsize=8)
        ax.set_title(f"site {name} ({species}, {sequence.program.rig.species[species].data.name})",
                     fontsize=9, loc="left", color=style.species_colours(sequence.program)[species])
        ax.set_ylim(-0.05, 1.08)
    bottom = axes[-1, 0]
    ticks = axis.ticks([e.start_s for e in sequence.played.events] + [e.end_s for e in sequence.played.events])
    bottom.set_xticks(ticks, [style.format_time(t, unit) for t in ticks], fontsize=8)
    bottom.set_xlabel(f"time at the atoms ({unit[0]})" + ("; hatched stretches compressed" if not axis.is_linear
                                                         else ""))
    axes[0, 0].legend(handles=_population_handles(n, bool(ideal)), loc="upper left", bbox_to_anchor=(1.01, 1.0),
                      fontsize=7.5, frameon=False)
    _title(fig, f"{result.program_name}: level populations (played timeline) — {noise_caption(result)}")
    return fig


def _history(cluster):
    """(times, pops[t, site, level]) with the start state first; empty when not recorded."""
    history = tuple(getattr(cluster, "history", ()) or ())
    if not history:
        return np.zeros(0), np.zeros((0, cluster.model.size, len(LEVELS)))
    times = np.array([0.0] + [t for t, _ in history])
    first = np.zeros((cluster.model.size, len(LEVELS)))
    first[:, 0] = 1.0
    pops = np.array([first] + [np.asarray(p)[:, :len(LEVELS)] for _, p in history])
    return times, pops


def _draw_levels(ax, cluster, site: int, n: int) -> None:
    times, pops = _history(cluster)
    if not len(times):
        ax.text(0.5, 0.5, "no population history recorded", transform=ax.transAxes, ha="center")
        return
    for level, label in enumerate(LEVELS):
        colour, dash = LEVEL_STYLES.get(level, ("#444444", "-"))
        p = pops[:, site, level]
        ax.plot(times, p, color=colour, linestyle=dash, linewidth=1.3, label=f"|{label}⟩")
        if n > 1:
            band = np.sqrt(np.clip(p * (1 - p), 0, None) / n)
            ax.fill_between(times, p - band, p + band, color=colour, alpha=0.18, linewidth=0)


def _pulse_markers(ax, sequence, site: str) -> None:
    """Light spans for the pulses reaching `site`, and a tick mark for every image."""
    colours = style.species_colours(sequence.program)
    for e in sequence.played.events:
        if e.kind == "pulse" and site in e.targets:
            ax.axvspan(e.start_s, e.end_s, color=colours.get(e.species, style.PORT_COLOUR), alpha=0.13, linewidth=0)
            ax.text(e.start_s, 1.075, e.drive, fontsize=6, color="#555555", va="top", ha="left", clip_on=True)
        elif e.kind == "image":
            ax.axvline(e.start_s, color=style.INK, linewidth=0.8, linestyle=(0, (2, 2)))


def _ideal_site_populations(result) -> dict[str, np.ndarray]:
    """Site → ideal P(|0⟩), P(|1⟩) of the expected target states."""
    out = {}
    for e in result.expectations:
        state = e["state"]
        target = observables.target_state(state.strip("|>"), state.startswith("|"))
        probs = np.abs(target) ** 2
        count = len(e["sites"])
        grid = probs.reshape([2] * count)
        for k, site in enumerate(e["sites"]):
            out[site] = np.array([grid.take(b, axis=k).sum() for b in (0, 1)])
    return out


def _draw_ideal(ax, ideal, end_s: float) -> None:
    if ideal is None:
        return
    for level in (0, 1):
        colour = LEVEL_STYLES[level][0]
        ax.plot([end_s], [ideal[level]], marker="D", markersize=7, markerfacecolor="none", markeredgewidth=1.4,
                color=colour, clip_on=False, zorder=5)


def _population_handles(n: int, ideal: bool) -> list:
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    handles = [Line2D([], [], color=c, linestyle=d, label=f"|{LEVELS[k]}⟩") for k, (c, d) in LEVEL_STYLES.items()
               if k < len(LEVELS)]
    if n > 1:
        handles.append(Patch(color="#888888", alpha=0.3, label=f"±1σ, N = {n}"))
    if ideal:
        handles.append(Line2D([], [], linestyle="none", marker="D", markerfacecolor="none", color=style.INK,
                              label="ideal target (end)"))
    handles.append(Patch(color="#888888", alpha=0.2, label="pulse on this site"))
    return handles


# ---- correlators -----------------------------------------------------------------
def correlator_errors(values: dict, n: int, given=None) -> dict[str, float]:
    """±1σ of each correlator: the simulation's own errors when it gives them, else projection noise."""
    if given:
        return {k: float(given.get(k, 0.0)) for k in CORRELATORS}
    if n <= 1:
        return {k: 0.0 for k in CORRELATORS}
    return {k: math.sqrt(max(0.0, 1 - values[k] ** 2) / n) for k in CORRELATORS}


def correlators_figure(result):
    """The nine ⟨σa σb⟩ of every two-site expectation: ideal, predicted (with error bars), and
    predicted given each imaging outcome when the sequence images another atom."""
    import matplotlib.pyplot as plt
    pairs = [e for e in result.expectations if "correlators" in e]
    count = max(1, len(pairs))
    fig, axes = plt.subplots(count, 1, figsize=(9.5, 3.4 * count + 0.6), squeeze=False, layout="constrained")
    for ax, e in zip(axes[:, 0], pairs):
        _correlator_panel(ax, e, repetitions(result))
    if not pairs:
        axes[0, 0].text(0.5, 0.5, "no two-site `expect` in this program", ha="center", va="center")
        axes[0, 0].set_axis_off()
    _title(fig, f"{result.program_name}: two-qubit correlators — {noise_caption(result)}")
    return fig


def _correlator_panel(ax, e: dict, n: int) -> None:
    state = e["state"]
    ideal = observables.ideal_correlators(state.strip("|>"), state.startswith("|"))
    series = [("predicted", e["correlators"], correlator_errors(e["correlators"], n, e.get("correlators_error")))]
    for cond in e.get("conditioned", []):
        if "correlators" in cond:
            weight = max(1, round(n * cond.get("probability", 1.0)))
            series.append((f"given {cond['record']}[{cond['site']}] = {cond['outcome']} "
                           f"(p = {cond['probability']:.3f})", cond["correlators"],
                           correlator_errors(cond["correlators"], weight if n > 1 else 1,
                                             cond.get("correlators_error"))))
    x = np.arange(len(CORRELATORS))
    width = 0.8 / (len(series) + 1)
    ax.bar(x - 0.4 + width / 2, [ideal[k] for k in CORRELATORS], width, label=f"ideal {state}",
           facecolor="white", edgecolor=style.INK, linewidth=1.0)
    colours = ("#1F5A9E", "#D4820F", "#7A1F5C", "#7F7F7F")
    for k, (label, values, errors) in enumerate(series):
        offset = -0.4 + width * (k + 1.5)
        has_errors = any(errors.values())
        ax.bar(x + offset, [values[c] for c in CORRELATORS], width, label=label, color=colours[k % len(colours)],
               yerr=[errors[c] for c in CORRELATORS] if has_errors else None,
               error_kw={"elinewidth": 1.0, "capsize": 2.5, "ecolor": style.INK})
    ax.set_xticks(x, [f"{a}{b}" for a, b in CORRELATORS])
    ax.set_xlabel("Pauli pair σa⊗σb (first named site first)", fontsize=8)
    ax.set_ylabel("⟨σa ⊗ σb⟩", fontsize=9)
    ax.set_ylim(-1.15, 1.15)
    ax.axhline(0, color=style.INK, linewidth=0.6)
    error = f" ± {e['fidelity_error']:.2g}" if e.get("fidelity_error") else ""
    ax.set_title(f"sites {', '.join(e['sites'])} vs {state}: fidelity {e['fidelity']:.4f}{error}", fontsize=9,
                 loc="left")
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
