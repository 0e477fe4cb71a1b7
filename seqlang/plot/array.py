"""`seqlang plot FILE --what array`: the array map, sites at their positions.

Each species has its own marker and outline colour; the fill shows P(bright) of the chosen record
(its first record by default) on a grey scale, white for sites the record does
not image. Positions in micrometres, as declared.
"""
from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from .timeline import _save  # noqa: E402

MARKERS = ("o", "s", "^", "D")
COLOURS = ("tab:blue", "tab:orange", "tab:green", "tab:purple")  # outline colour per species


def plot_array(sequence, path: str, record: str | None = None, **options) -> None:
    """Simulate (default options) and draw the map shaded by P(bright) of `record`; a program
    with lattices and no imaging is drawn without simulating (traps, loaded atoms, fill paths)."""
    program = sequence.program
    if record is None and program.layouts and not _images(sequence):
        _save(draw(program, {}, None), path)
        return
    from ..sim.api import simulate
    result = simulate(sequence, **options)
    records = result.records
    if record is not None and record not in records:
        raise ValueError(f"no record `{record}`; records: {', '.join(records) or 'none'}")
    record = record or next(iter(records), None)
    _save(draw(sequence.program, records.get(record, {}), record), path)


def _images(sequence) -> bool:
    return any(e.kind == "image" for e in sequence.timeline.events)


def _traps_and_paths(ax, program) -> None:
    """Empty traps as small grey rings; each carry of a fill as a line from its trap to its target."""
    state = program.arrays
    if state is None:
        return
    empty = [s for n, s in state.traps.items() if n not in state.loaded]
    if empty:
        ax.scatter([s.position_m[0] * 1e6 for s in empty], [s.position_m[1] * 1e6 for s in empty], s=18,
                   facecolors="none", edgecolors="0.6", linewidths=0.8, label="empty trap", zorder=1)
    for plan in state.plans:
        for carry in plan.carries:
            points = [leg[0] for leg in carry.legs] + [carry.legs[-1][1]]
            ax.plot([p[0] * 1e6 for p in points], [p[1] * 1e6 for p in points], color="0.35", linewidth=0.9,
                    zorder=2)
    if any(plan.carries for plan in state.plans):
        ax.plot([], [], color="0.35", linewidth=0.9, label="fill path")


def draw(program, bright: dict, record: str | None):
    """The figure: one marker per site, species by marker, P(bright) by grey level."""
    fig, ax = plt.subplots(figsize=(6.4, 5.6))
    _traps_and_paths(ax, program)
    cmap = plt.get_cmap("Greys")
    shown = None
    for k, species in enumerate(program.rig.species):
        sites = [program.sites[s] for s in program.sites_of(species)]
        if not sites:
            continue
        xs = [s.position_m[0] * 1e6 for s in sites]
        ys = [s.position_m[1] * 1e6 for s in sites]
        values = [bright.get(s.name, float("nan")) for s in sites]
        shown = ax.scatter(xs, ys, c=values, cmap=cmap, vmin=0, vmax=1, marker=MARKERS[k % len(MARKERS)],
                           s=90, edgecolors=COLOURS[k % len(COLOURS)], linewidths=1.8, label=species,
                           plotnonfinite=True, zorder=3)
    ax.set_aspect("equal", adjustable="datalim")
    ax.set_xlabel("x (um)")
    ax.set_ylabel("y (um)")
    ax.legend(title="species", loc="upper right", fontsize="small")
    if shown is not None and (record or program.arrays is None):
        fig.colorbar(shown, ax=ax, label=f"P(bright) of record {record}" if record else "no record")
    ax.set_title(f"{program.name}: {len(program.sites)} sites" + (
        f" loaded of {len(program.arrays.traps)} traps, before the fill" if program.arrays is not None else ""))
    fig.tight_layout()
    return fig
