"""The figure palette stays colour-blind safe; time units are written as people read them."""
from __future__ import annotations

import itertools

import numpy as np
import pytest

from seqlang.plot import style
from seqlang.plot.axis import time_axis
from seqlang.show import pretty_unit, quantity
from seqlang.lang import units

# Colour distance in CAM02-UCS below which two colours are hard to tell apart at a glance;
# ~15-20 is the common practice threshold for categorical palettes.
MIN_DISTANCE = 15.0
CVD = ("deuteranomaly", "protanomaly", "tritanomaly")


def _rgb(hex_colour: str) -> np.ndarray:
    return np.array([int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)])


@pytest.mark.parametrize("deficiency", (None,) + CVD)
def test_palette_pairs_stay_apart_for_colour_blind_viewers(deficiency):
    """CVD simulation of Machado, Oliveira & Fernandes, IEEE TVCG 15, 1291 (2009), at full severity,
    as implemented by the colorspacious library; distances in CAM02-UCS (Luo, Cui & Li 2006)."""
    colorspacious = pytest.importorskip("colorspacious")
    colours = [_rgb(c) for c in (*style.SPECIES_COLOURS, style.PORT_COLOUR)]
    if deficiency:
        space = {"name": "sRGB1+CVD", "cvd_type": deficiency, "severity": 100}
        colours = [np.clip(colorspacious.cspace_convert(c, space, "sRGB1"), 0, 1) for c in colours]
    for a, b in itertools.combinations(colours, 2):
        assert colorspacious.deltaE(a, b, input_space="sRGB1") >= MIN_DISTANCE


def test_palette_is_our_own_not_a_library_default():
    import matplotlib
    from matplotlib.colors import to_hex
    defaults = {to_hex(c) for c in matplotlib.rcParams["axes.prop_cycle"].by_key()["color"]}
    assert not {c.lower() for c in style.SPECIES_COLOURS} & defaults


def test_micro_is_written_as_micro():
    assert pretty_unit("us") == "µs" and pretty_unit("um") == "µm" and pretty_unit("ms") == "ms"
    assert quantity(11.364e-6, units.DURATION) == "11.364 µs"
    assert quantity(4e-6, units.LENGTH) == "4 µm"
    assert style.time_unit(27e-6) == ("µs", 1e-6) and style.time_unit(26e-3)[0] == "ms"


def test_piecewise_axis_makes_a_short_pulse_legible():
    """A 500 ns pulse between two 10 µs pulses: linear it gets 2.4 % of the width, piecewise far more."""
    spans = [(0.0, 10e-6), (10e-6, 10.5e-6), (10.5e-6, 20.5e-6)]
    linear = time_axis(spans, piecewise=False)
    piecewise = time_axis(spans)
    share = lambda axis: float(axis.forward(10.5e-6) - axis.forward(10e-6))  # noqa: E731
    assert share(linear) == pytest.approx(0.5 / 20.5)
    assert share(piecewise) > 0.09
    assert piecewise.compressed == ((0.0, 10e-6), (10.5e-6, 20.5e-6))
    t = np.linspace(0, 20.5e-6, 57)
    np.testing.assert_allclose(piecewise.inverse(piecewise.forward(t)), t, atol=1e-15)
    assert np.all(np.diff(piecewise.forward(t)) > 0), "the map is monotone"


def test_similar_lengths_keep_a_linear_axis():
    axis = time_axis([(0.0, 1e-6), (1e-6, 2.5e-6)])
    assert axis.is_linear
