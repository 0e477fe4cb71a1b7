"""A piecewise-linear time axis, so that a 500 ns pulse stays legible beside 10 µs ones.

The time between consecutive event boundaries is an *interval*. Intervals up to
`STRETCH` times the shortest pulse are drawn to scale; longer ones are drawn
shorter, L₀(1 + ½·ln(L/L₀)) wide with L₀ = STRETCH × shortest pulse, and shaded
so that the reader sees where time was compressed. Inside each interval the axis
stays linear, so envelopes keep their shape. Tick labels give true times.

>>> axis = time_axis([(0, 10e-6), (10e-6, 10.5e-6)])            # doctest: +SKIP
>>> axis.forward(np.array([10.25e-6]))                           # doctest: +SKIP
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

STRETCH = 2.0  # intervals up to this many shortest pulses are drawn to scale
MIN_TICK_GAP = 0.055  # fraction of the axis width between two tick labels


@dataclass(frozen=True)
class TimeAxis:
    """Knots of the map from true time (s) to drawn position (0 … 1)."""

    knots_s: np.ndarray
    knots_x: np.ndarray
    compressed: tuple[tuple[float, float], ...]  # intervals drawn shorter than to scale

    @property
    def is_linear(self) -> bool:
        return not self.compressed

    def forward(self, t):
        return _interp(np.asarray(t, dtype=float), self.knots_s, self.knots_x)

    def inverse(self, x):
        return _interp(np.asarray(x, dtype=float), self.knots_x, self.knots_s)

    def apply(self, ax) -> None:
        """Give `ax` this time scale (its x limits become the whole sequence)."""
        if len(self.knots_s) < 2 or self.is_linear:
            ax.set_xlim(self.knots_s[0], self.knots_s[-1])
            return
        ax.set_xscale("function", functions=(self.forward, self.inverse))
        ax.set_xlim(self.knots_s[0], self.knots_s[-1])

    def ticks(self, candidates_s) -> list[float]:
        """Candidate tick times thinned so that labels never crowd (both ends kept)."""
        ends = [float(self.knots_s[0]), float(self.knots_s[-1])]
        chosen: list[float] = [ends[0]]
        for t in sorted(set(float(c) for c in candidates_s)):
            if self.forward(t) - self.forward(chosen[-1]) >= MIN_TICK_GAP \
                    and self.forward(ends[1]) - self.forward(t) >= MIN_TICK_GAP:
                chosen.append(t)
        return chosen + [ends[1]] if ends[1] > ends[0] else chosen


def _interp(x: np.ndarray, xp: np.ndarray, fp: np.ndarray) -> np.ndarray:
    """np.interp with linear extrapolation past both ends (matplotlib asks beyond the limits)."""
    out = np.interp(x, xp, fp)
    if len(xp) >= 2:
        low, high = x < xp[0], x > xp[-1]
        out = np.where(low, fp[0] + (x - xp[0]) * (fp[1] - fp[0]) / (xp[1] - xp[0]), out)
        out = np.where(high, fp[-1] + (x - xp[-1]) * (fp[-1] - fp[-2]) / (xp[-1] - xp[-2]), out)
    return out


def time_axis(spans: list[tuple[float, float]], total_s: float | None = None,
              piecewise: bool = True) -> TimeAxis:
    """The axis for events occupying `spans` [(start, end), …] in seconds.

    `piecewise=False`, or spans whose lengths differ by less than STRETCH, give a
    plain linear axis.
    """
    ends = [e for _, e in spans]
    total = max([total_s or 0.0] + ends + [1e-12])
    bounds = np.unique(np.clip([0.0, total] + [t for span in spans for t in span], 0.0, total))
    lengths = np.diff(bounds)
    pulses = [e - s for s, e in spans if e - s > 0]
    shortest = min(pulses) if pulses else total
    reference = STRETCH * shortest
    widths = np.array([_width(length, reference) for length in lengths])
    compressed = tuple((float(a), float(b)) for a, b, w, L in zip(bounds[:-1], bounds[1:], widths, lengths)
                       if w < L * (1 - 1e-9))
    if not piecewise or not compressed:
        return TimeAxis(np.array([0.0, total]), np.array([0.0, 1.0]), ())
    x = np.concatenate([[0.0], np.cumsum(widths)]) / widths.sum()
    return TimeAxis(bounds, x, compressed)


def _width(length: float, reference: float) -> float:
    return length if length <= reference else reference * (1.0 + 0.5 * math.log(length / reference))


def shade_compressed(ax, axis: TimeAxis) -> None:
    """Hatch the compressed stretches lightly and say so once."""
    for a, b in axis.compressed:
        ax.axvspan(a, b, facecolor="none", edgecolor="#DDDDDD", hatch="////", linewidth=0, zorder=0)
