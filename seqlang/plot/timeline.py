"""`seqlang plot --what timeline`: every sequencer output over the played time.

One lane per port, grouped by species (drive ports, their TTL gates, the
species' imaging) and then the plain lab ports. Pulses are drawn with their
envelopes, scaled to the drive's maximum Rabi frequency; gates as TTL windows;
images as hatched boxes with their record; switches and set points as steps.
Times are the physical times at the atoms (issue tick + latency). The time
axis is piecewise (see :mod:`seqlang.plot.axis`) unless asked to be linear.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..compile import envelopes
from ..compile.hardware import SEQUENCER
from ..compile.pipeline import Checked
from . import style
from .axis import TimeAxis, shade_compressed, time_axis
from .save import save_png

LANE_HALF = 0.38  # half the height of a lane's drawing area
DETAILED_ENTRIES = 400  # a lane with more entries is drawn as plain boxes (envelopes and labels would not show)


@dataclass(frozen=True)
class Lane:
    """One drawn row: a sequencer output, what it is for, its group and colour."""

    port: str
    label: str
    group: str  # species name, or "lab"
    role: str  # "pulse", "gate", "image", "digital", "analog"
    colour: str


def lanes(checked: Checked) -> list[Lane]:
    """The lanes of the ports that play something, in rig order grouped by species."""
    rig, busy = checked.program.rig, set(checked.plan.ports) - {SEQUENCER}  # hold rows play nothing
    colours = style.species_colours(checked.program)
    out: list[Lane] = []
    for species in rig.species:
        for drive in (d for d in rig.drives.values() if d.species == species):
            if drive.port in busy:
                out.append(Lane(drive.port, f"{drive.name}\n{drive.port}", species, "pulse", colours[species]))
            if drive.gate in busy and all(lane.port != drive.gate for lane in out):
                out.append(Lane(drive.gate, f"{drive.name} gate\n{drive.gate}", species, "gate", colours[species]))
        imaging = rig.imaging.get(species)
        if imaging is not None and imaging.port in busy:
            out.append(Lane(imaging.port, f"image {species}\n{imaging.port}", species, "image", colours[species]))
    for port in rig.ports.values():
        if port.channel in busy:
            out.append(Lane(port.channel, f"{port.name}\n{port.channel}", "lab", port.kind, style.PORT_COLOUR))
    drawn = {lane.port for lane in out}
    for channel in sorted(busy - drawn):  # an output no declaration names: still shown, never dropped
        out.append(Lane(channel, channel, "lab", "digital", style.PORT_COLOUR))
    return out


def _physical(checked: Checked, entry) -> tuple[float, float]:
    """(start, duration) in seconds at the atoms of one port-table entry."""
    tick = checked.plan.tick_s
    return (entry.tick + checked.plan.latency_ticks.get(entry.port, 0)) * tick, entry.ticks * tick


def _spans(checked: Checked) -> list[tuple[float, float]]:
    spans = []
    for port, entries in checked.plan.ports.items():
        for entry in entries if port != SEQUENCER else ():
            start, length = _physical(checked, entry)
            spans.append((start, start + length))
    return spans


def timeline_axis(checked: Checked, piecewise: bool = True) -> TimeAxis:
    """The time axis shared by the timeline and the population figures."""
    return time_axis(_spans(checked), checked.quantized.duration_s, piecewise)


def timeline_figure(checked: Checked, piecewise: bool = True):
    """The timeline as a matplotlib Figure (lanes on the y axis, true times on the x axis)."""
    import matplotlib.pyplot as plt
    rows = lanes(checked)
    fig, ax = plt.subplots(figsize=(11, 0.62 * len(rows) + 2.2), layout="constrained")
    axis = timeline_axis(checked, piecewise)
    axis.apply(ax)
    shade_compressed(ax, axis)
    labels = _LabelPlacer(axis)
    for row, lane in enumerate(rows):
        entries = checked.plan.ports[lane.port]
        if len(entries) > DETAILED_ENTRIES:
            _draw_boxes(ax, checked, lane, entries, row)
            continue
        for entry in entries:
            _draw_entry(ax, checked, lane, entry, row, labels)
    _decorate(ax, checked, rows, axis)
    return fig


def _draw_boxes(ax, checked: Checked, lane: Lane, entries, row: int) -> None:
    """Many events on one lane: one box each, in a single collection."""
    spans = [_physical(checked, e) for e in entries]
    ax.broken_barh(spans, (row - LANE_HALF, 2 * LANE_HALF), color=lane.colour, linewidth=0)
    ax.text(spans[0][0], row - LANE_HALF - 0.02, f"{len(entries)} events", fontsize=style.SOURCE_FONT,
            color="#555555", va="bottom", ha="left", clip_on=True)


def _draw_entry(ax, checked: Checked, lane: Lane, entry, row: int, labels) -> None:
    start, length = _physical(checked, entry)
    base, top = row + LANE_HALF, row - LANE_HALF
    event = checked.quantized.events[entry.event] if 0 <= entry.event < len(checked.quantized.events) else None
    if entry.kind == "pulse" and event is not None:
        drive = checked.program.rig.drives[entry.drive]
        t = np.linspace(0.0, length, 160) if event.shape.kind != "square" else np.array([0.0, length])
        height = 2 * LANE_HALF * entry.rabi_hz / drive.max_rabi_hz * envelopes.envelope(event.shape, length, t)
        times = np.concatenate([[start], start + t, [start + length]])
        ys = np.concatenate([[base], base - height, [base]])
        ax.fill(times, ys, color=lane.colour, alpha=0.85, linewidth=0.6, edgecolor=lane.colour)
        labels.duration(ax, start, length, row)
    elif entry.kind == "gate":
        ax.step([start, start, start + length, start + length], [base, top + 0.1, top + 0.1, base],
                where="post", color=lane.colour, linewidth=1.3)
        ax.fill_between([start, start + length], base, top + 0.1, color=lane.colour, alpha=0.12, linewidth=0)
    elif entry.kind == "image":
        ax.fill_between([start, start + length], base, top, facecolor="white", edgecolor=lane.colour,
                        hatch="xx", linewidth=1.0)
        record = event.record if event is not None else ""
        from ..lang import units
        from ..show import quantity
        ax.text(start, row, f" → {record} ({quantity(length, units.DURATION)}) ", va="center", ha="left", fontsize=8, color=style.INK, clip_on=True,
                bbox={"facecolor": "white", "edgecolor": "none", "pad": 1.0})
    elif entry.kind in ("switch", "set"):
        _draw_level(ax, checked, lane, entry, start, row)
    else:  # trigger: a short TTL pulse with a marker
        ax.fill_between([start, start + max(length, 0)], base, top, color=lane.colour, linewidth=0)
        ax.plot([start], [top], marker="v", color=style.INK, markersize=5)
    text = f"L{entry.source.rsplit(':', 1)[-1]}"
    if entry.kind == "pulse" and entry.phase_rad:
        text += f" φ{entry.phase_rad:+.2f}"  # a phase jump is easy to miss between back-to-back pulses
    if event is not None and event.decision is not None:
        _mark_conditioned(ax, start, length, row, lane)
        text += f" ← {event.decision.selection.record}"  # played per shot from that image record
    labels.add(ax, start, row, text, entry.kind != "gate")


def _mark_conditioned(ax, start: float, length: float, row: int, lane: Lane) -> None:
    """A dashed frame: what plays here depends on a mid-sequence image in the same shot."""
    from matplotlib.patches import Rectangle
    ax.add_patch(Rectangle((start, row - LANE_HALF), max(length, 0.0), 2 * LANE_HALF, fill=False,
                           edgecolor=style.INK, linestyle=(0, (3, 2)), linewidth=1.0, zorder=3))


def _draw_level(ax, checked: Checked, lane: Lane, entry, start: float, row: int) -> None:
    """A new level on a digital or analog line: a step, held to the end, with its value."""
    port = next((p for p in checked.program.rig.ports.values() if p.channel == entry.port), None)
    low, high = (port.value_range if port is not None else None) or (0.0, 1.0)
    fraction = 0.5 if high == low else (entry.value - low) / (high - low)
    y = row + LANE_HALF - 2 * LANE_HALF * min(max(fraction, 0.0), 1.0)
    end = checked.quantized.duration_s
    ax.plot([start, start, end], [row + LANE_HALF, y, y], color=style.INK, linewidth=1.2)
    text = ("on" if entry.value else "off") if entry.kind == "switch" else _set_text(port, entry.value)
    ax.text(start, y + 0.04, f" {text}", va="top", ha="left", fontsize=7.5, color=style.INK)


def _set_text(port, value: float) -> str:
    from ..show import quantity
    return quantity(value, port.unit_dim) if port is not None and port.unit_dim else f"{value:g}"


class _LabelPlacer:
    """Small source-line labels above events, skipped where they would overlap on a lane."""

    CHAR = 0.0055  # fraction of the axis width one label character takes
    WIDE = 0.07  # pulses at least this wide (fraction of the axis) get their duration written inside

    def __init__(self, axis: TimeAxis):
        self.axis = axis
        self.last: dict[int, float] = {}

    def add(self, ax, start: float, row: int, text: str, wanted: bool) -> None:
        x = float(self.axis.forward(start)) if not self.axis.is_linear else self._linear(start)
        if not wanted or x < self.last.get(row, -1.0):
            return
        self.last[row] = x + self.CHAR * (len(text) + 1)
        ax.text(start, row - LANE_HALF - 0.02, text, fontsize=style.SOURCE_FONT, color="#555555",
                va="bottom", ha="left", clip_on=True)

    def duration(self, ax, start: float, length: float, row: int) -> None:
        """The duration written inside a pulse wide enough to hold it (compressed stretches hide it)."""
        from ..lang import units
        from ..show import quantity
        if self._x(start + length) - self._x(start) > self.WIDE:
            ax.text(start + length / 2, row + 0.1, quantity(length, units.DURATION), fontsize=7, color="white",
                    ha="center", va="center", clip_on=True)

    def _x(self, t: float) -> float:
        return float(self.axis.forward(t)) if not self.axis.is_linear else self._linear(t)

    def _linear(self, start: float) -> float:
        return (start - self.axis.knots_s[0]) / max(self.axis.knots_s[-1] - self.axis.knots_s[0], 1e-30)


def _decorate(ax, checked: Checked, rows: list[Lane], axis: TimeAxis) -> None:
    unit = style.time_unit(checked.quantized.duration_s)
    ax.set_yticks(range(len(rows)), [lane.label for lane in rows], fontsize=8)
    for label, lane in zip(ax.get_yticklabels(), rows):
        label.set_color(lane.colour if lane.group != "lab" else style.INK)
    ax.set_ylim(len(rows) - 0.5, -0.75)
    _group_separators(ax, rows)
    candidates = [t for span in _spans(checked) for t in span] if not axis.is_linear else None
    if candidates is not None:
        ticks = axis.ticks(candidates)
        ax.set_xticks(ticks, [style.format_time(t, unit) for t in ticks], fontsize=8)
    else:
        from matplotlib.ticker import FuncFormatter
        ax.xaxis.set_major_formatter(FuncFormatter(lambda t, _: style.format_time(t, unit)))
    ax.set_xlabel(f"time at the atoms ({unit[0]})" + ("; hatched stretches compressed" if not axis.is_linear
                                                      else ""))
    tick_ns = checked.plan.tick_s * 1e9
    ax.set_title(f"{checked.program.name}: played timeline (tick {tick_ns:g} ns, latency compensated)",
                 fontsize=10, loc="left")
    ax.legend(handles=_legend_handles(checked, rows), loc="upper left", bbox_to_anchor=(1.01, 1.0),
              fontsize=7.5, frameon=False)


def _group_separators(ax, rows: list[Lane]) -> None:
    for k in range(1, len(rows)):
        if rows[k].group != rows[k - 1].group:
            ax.axhline(k - 0.5, color="#BBBBBB", linewidth=0.6)


def _legend_handles(checked: Checked, rows: list[Lane]) -> list:
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    groups = dict.fromkeys(lane.group for lane in rows)
    handles = []
    for group in groups:
        if group == "lab":
            handles.append(Patch(color=style.PORT_COLOUR, label="lab ports"))
        else:
            isotope = checked.program.rig.species[group].data.name
            handles.append(Patch(color=next(l.colour for l in rows if l.group == group),
                                 label=f"{group} ({isotope})"))
    roles = {lane.role for lane in rows}
    if "pulse" in roles:
        handles.append(Patch(facecolor="#888888", label="pulse: height = Rabi / drive max"))
    if "gate" in roles:
        handles.append(Line2D([], [], color="#555555", drawstyle="steps-post", label="TTL gate open"))
    if "image" in roles:
        handles.append(Patch(facecolor="white", edgecolor="#555555", hatch="xx", label="image → record"))
    if roles & {"digital", "analog"}:
        handles.append(Line2D([], [], color=style.INK, label="switch / set level"))
    handles.append(Line2D([], [], linestyle="none", marker="$L$", color="#555555",
                          label="L12 φ+1.57: source line 12, phase (rad)"))
    if checked.quantized.conditioned():
        handles.append(Patch(fill=False, edgecolor=style.INK, linestyle=(0, (3, 2)),
                             label="dashed: played per shot from an image record (← record)"))
    return handles


def plot_timeline(checked: Checked, path: str, piecewise: bool = True) -> None:
    """Draw the timeline into `path` (.png, .svg or .pdf by its extension)."""
    save_png(timeline_figure(checked, piecewise), path)


def _save(fig, path: str) -> None:
    """Kept for callers of the earlier name."""
    save_png(fig, path)
