"""Colours, units and small drawing helpers shared by every figure.

The palette is our own ("millpond" colours), chosen so that every pair stays
apart for viewers with full-severity deuteranopia, protanopia or tritanopia:
tests/test_plot_style.py checks the CAM02-UCS colour distance of every pair
after the CVD simulation of Machado, Oliveira & Fernandes (IEEE TVCG 15, 1291,
2009), as implemented by the `colorspacious` library. Species take the colours
in the order the rig declares them; plain lab ports are grey.
"""
from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

# name → hex; the first three go to species in rig order, the last to lab ports.
PALETTE = {
    "marigold": "#D4820F",
    "lake": "#1F5A9E",
    "damson": "#7A1F5C",
    "gravel": "#A8A8A8",
}
SPECIES_COLOURS = (PALETTE["marigold"], PALETTE["lake"], PALETTE["damson"])
PORT_COLOUR = PALETTE["gravel"]
INK = "#222222"  # text, ideal-target outlines, the all-sources total
BASELINE_COLOUR = "#E6E6E6"  # the noiseless baseline and other reference bars
SOURCE_FONT = 6.5  # point size of the small source-line labels


def species_colours(program) -> dict[str, str]:
    """Colour of each species of the rig, in declaration order."""
    names = list(program.rig.species)
    return {name: SPECIES_COLOURS[i % len(SPECIES_COLOURS)] for i, name in enumerate(names)}


def time_unit(span_s: float) -> tuple[str, float]:
    """The unit to label a time axis covering `span_s`, and its size in seconds."""
    if span_s >= 5e-3:
        return "ms", 1e-3
    if span_s >= 5e-6:
        return "µs", 1e-6
    return "ns", 1e-9


def format_time(seconds: float, unit: tuple[str, float]) -> str:
    """A tick label: the number in `unit`, without trailing zeros."""
    value = seconds / unit[1]
    text = f"{value:.4f}".rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text
