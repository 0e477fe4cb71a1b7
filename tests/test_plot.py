"""The figures as objects: lanes, labels, units, legends, error bars, log axes; and non-blank PNGs.

Golden images are brittle; these tests read the matplotlib objects instead.
"""
from __future__ import annotations

import io
import shutil
from pathlib import Path

import matplotlib
import numpy as np
import pytest

import seqlang
from seqlang.plot.budget import budget_figure, budget_rows
from seqlang.plot.results import correlators_figure, populations_figure
from seqlang.plot.save import figure_bytes
from seqlang.plot.timeline import lanes, timeline_figure

matplotlib.use("Agg")
ROOT = Path(__file__).resolve().parent.parent
PROGRAMS = ROOT / "programs"

# Two sodium atoms far apart and a caesium atom that is imaged: the sodium pair's
# numbers are reported given each imaging outcome of the caesium atom.
IMAGED = """\
use "millpond.rig"
site d = na at (0, 0) um
site e = na at (60, 0) um
site h = cs at (0, 60) um
sequence s {
  together {
    pulse mw_na area pi/2
    pulse mw_cs area pi/2
  }
  image cs -> helper
}
expect d, e as |00>
"""


@pytest.fixture(scope="module")
def bell():
    return seqlang.load(str(PROGRAMS / "bell_pair.seq"))


@pytest.fixture(scope="module")
def noisy_bell(bell):
    return seqlang.simulate(bell, noise="decay,intensity", shots=16, seed=3, repetitions=16, history=True)


def _texts(artists) -> list[str]:
    return [t.get_text() for t in artists]


def _non_blank(png: bytes) -> None:
    """A pixel-level smoke test: a real PNG with a fair share of drawn, varied pixels."""
    image = matplotlib.image.imread(io.BytesIO(png), format="png")
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    rgb = image[..., :3]
    drawn = (rgb < 0.95).any(axis=-1).mean()
    assert 0.02 < drawn < 0.9, f"{drawn:.3f} of the pixels drawn"
    assert len(np.unique((rgb * 255).astype(int).reshape(-1, 3), axis=0)) > 20, "more than a few flat colours"


# ---- timeline ----------------------------------------------------------------------
def test_timeline_has_one_lane_per_port_grouped_by_species(bell):
    found = lanes(bell.checked)
    assert [lane.port for lane in found] == ["awg0.1", "awg1.1", "ttl.4", "awg0.2", "awg1.2", "ttl.5"]
    assert [lane.group for lane in found] == ["na"] * 3 + ["cs"] * 3
    assert [lane.role for lane in found] == ["pulse", "pulse", "gate"] * 2
    assert len({lane.colour for lane in found}) == 2, "one colour per species"


def test_timeline_figure_labels_units_and_legend(bell):
    fig = timeline_figure(bell.checked)
    ax = fig.axes[0]
    assert _texts(ax.get_yticklabels()) == [lane.label for lane in lanes(bell.checked)]
    assert "(µs)" in ax.get_xlabel() and "us)" not in ax.get_xlabel()
    legend = _texts(ax.get_legend().get_texts())
    assert {"na (Na23)", "cs (Cs133)", "TTL gate open"} <= set(legend)
    assert any("source line" in t for t in legend)
    labels = {t.get_text() for t in ax.texts}
    assert {"L15", "L16", "L17", "L11 φ-1.57", "L18 φ+1.57"} <= labels, "source lines, and phases where set"
    assert "11.364 µs" in labels, "a long pulse shows its duration (the compressed axis hides it)"
    assert ax.get_xscale() == "function", "the piecewise time axis"
    ticks = [float(t.get_text()) for t in ax.get_xticklabels()]
    assert ticks[0] == 0 and ticks[-1] == pytest.approx(27.104)
    _non_blank(figure_bytes(fig, dpi=40))


def test_timeline_draws_the_short_rydberg_pulse_wide_enough(bell):
    """The 500 ns Rydberg pulse is over 4 % of the plot's width (1.8 % on a linear axis)."""
    fig = timeline_figure(bell.checked)
    ax = fig.axes[0]
    pulse = next(e for e in bell.played.events if e.drive == "ryd_cs")
    x0, x1 = (ax.transData.transform([(t, 0)])[0, 0] for t in (pulse.start_s, pulse.end_s))
    width = ax.get_window_extent().width
    assert (x1 - x0) / width > 0.04
    linear = timeline_figure(bell.checked, piecewise=False).axes[0]
    x0, x1 = (linear.transData.transform([(t, 0)])[0, 0] for t in (pulse.start_s, pulse.end_s))
    assert (x1 - x0) / linear.get_window_extent().width < 0.025
    matplotlib.pyplot.close("all")


def test_timeline_shows_images_levels_and_lab_ports():
    sequence = seqlang.load(str(PROGRAMS / "hold_and_image.seq"))
    roles = {lane.port: lane.role for lane in lanes(sequence.checked)}
    assert roles["ttl.9"] == "image" and roles["ttl.12"] == "digital" and roles["dac.3"] == "analog"
    ax = timeline_figure(sequence.checked).axes[0]
    texts = {t.get_text().strip() for t in ax.texts}
    assert {"→ mid_cs (11 ms)", "→ final_na (15 ms)", "on", "500 mA"} <= texts
    assert "(ms)" in ax.get_xlabel()
    assert "lab ports" in _texts(ax.get_legend().get_texts())
    _non_blank(figure_bytes(ax.figure, dpi=40))



def _dashed_frames(ax) -> list:
    from matplotlib.patches import Rectangle
    return [p for p in ax.patches if isinstance(p, Rectangle) and not p.get_fill() and p.get_linestyle() != "solid"]


def test_timeline_marks_the_events_played_from_an_image_record(bell):
    sequence = seqlang.load(str(PROGRAMS / "phase_correction.seq"))
    conditioned = sequence.checked.quantized.conditioned()
    assert conditioned, "the demo's final data pulse depends on the helpers' image"
    ax = timeline_figure(sequence.checked).axes[0]
    assert len(_dashed_frames(ax)) == len(conditioned)
    assert any(t.get_text().endswith("← mid") for t in ax.texts)
    assert any("image record" in t for t in _texts(ax.get_legend().get_texts()))
    plain = timeline_figure(bell.checked).axes[0]  # nothing conditioned: no frame, no legend entry
    assert not _dashed_frames(plain)
    assert not any("image record" in t for t in _texts(plain.get_legend().get_texts()))

# ---- populations and correlators ---------------------------------------------------
def test_populations_figure_has_bands_markers_ideal_and_noise_caption(bell, noisy_bell):
    fig = populations_figure(noisy_bell, bell)
    axes = fig.axes
    assert [ax.get_title(loc="left") for ax in axes] == ["site d (na, Na23)", "site h (cs, Cs133)"]
    caption = fig._suptitle.get_text()
    assert "decay, intensity" in caption and "16 shots, seed 3" in caption and "N = 16" in caption
    legend = _texts(axes[0].get_legend().get_texts())
    assert {"|0⟩", "|1⟩", "|r⟩", "|x⟩", "±1σ, N = 16", "ideal target (end)"} <= set(legend)
    pulse_labels = {t.get_text() for t in axes[0].texts}
    assert {"mw_na", "ryd_na"} <= pulse_labels, "pulse markers name their drive"
    assert "(µs)" in axes[-1].get_xlabel()
    ideal = [line for line in axes[0].lines if line.get_marker() == "D"]
    assert sorted(float(line.get_ydata()[0]) for line in ideal) == pytest.approx([0.5, 0.5]), "psi_plus: halves"
    _non_blank(figure_bytes(fig, dpi=40))


def test_correlator_bars_have_error_bars_and_the_ideal_beside(noisy_bell):
    fig = correlators_figure(noisy_bell)
    ax = fig.axes[0]
    assert _texts(ax.get_xticklabels()) == ["XX", "XY", "XZ", "YX", "YY", "YZ", "ZX", "ZY", "ZZ"]
    assert "σa ⊗ σb" in ax.get_ylabel()
    bars = {c.get_label(): c for c in ax.containers if hasattr(c, "patches")}
    ideal = [p.get_height() for p in bars["ideal psi_plus"].patches]
    assert ideal == pytest.approx([1, 0, 0, 0, 1, 0, 0, 0, -1], abs=1e-12)
    predicted = bars["predicted"]
    assert predicted.errorbar is not None, "predicted bars carry error bars"
    segments = predicted.errorbar.lines[2][0].get_segments()
    e = noisy_bell.expectations[0]
    for (low, high), key in zip(segments, ["XX", "XY", "XZ", "YX", "YY", "YZ", "ZX", "ZY", "ZZ"]):
        # the simulation's Monte Carlo error where it gives one, else projection noise for
        # N = 16 repetitions of a ±1 outcome with mean c
        given = (e.get("correlators_error") or {}).get(key)
        expected = given if given is not None else np.sqrt((1 - e["correlators"][key] ** 2) / 16)
        assert high[1] - low[1] == pytest.approx(2 * expected)
    _non_blank(figure_bytes(fig, dpi=40))


def test_conditioned_correlators_drawn_when_another_atom_is_imaged(tmp_path):
    shutil.copy(PROGRAMS / "millpond.rig", tmp_path / "millpond.rig")
    (tmp_path / "imaged.seq").write_text(IMAGED, encoding="utf-8")
    result = seqlang.simulate(str(tmp_path / "imaged.seq"), repetitions=100)
    ax = correlators_figure(result).axes[0]
    labels = [c.get_label() for c in ax.containers if hasattr(c, "patches")]
    assert labels[:2] == ["ideal |00>", "predicted"]
    assert sorted(labels[2:]) == ["given helper[h] = 0 (p = 0.500)", "given helper[h] = 1 (p = 0.500)"]
    matplotlib.pyplot.close("all")


# ---- budget --------------------------------------------------------------------------
NUMBERS = {
    "program": "demo", "shots": 10, "seed": 2, "engines": ["fast"],
    "not_declared": {"imaging": "no image in the sequence"},
    "expectations": [{"sites": ["a", "b"], "state": "phi_plus",
                      "infidelity": {"none": 1e-4, "all": 2.2e-2, "decay": 7.1e-3, "doppler": 1.0e-2,
                                     "t2_star": 5e-4, "imaging": 1e-4, "motion": 1e-4},
                      "error": {"none": 0, "all": 2e-3, "decay": 0, "doppler": 1e-3, "t2_star": 1e-4,
                                "imaging": 0, "motion": 1e-6}}],
}


def test_budget_rows_sorted_with_baseline_and_total_apart():
    rows = budget_rows(NUMBERS["expectations"][0], NUMBERS["not_declared"])
    assert [r.name for r in rows] == ["all", "none", "doppler", "decay", "t2_star", "motion", "imaging"]
    assert [r.kind for r in rows[:2]] == ["total", "baseline"]
    assert rows[2].value == pytest.approx(1.0e-2 - 1e-4), "a source adds to the noiseless baseline"
    assert rows[2].what_if == pytest.approx(2.2e-2 - 0.5 * (1.0e-2 - 1e-4))
    assert rows[-1].value is None and rows[-1].note == "no image in the sequence"


def test_budget_figure_log_axis_not_declared_and_what_if():
    fig = budget_figure(NUMBERS, what_if=True)
    ax, what_if = fig.axes[0], fig.axes[1]
    assert ax.get_xscale() == "log"
    assert _texts(ax.get_yticklabels()) == ["all sources", "noiseless (gate error of the model)", "doppler",
                                            "decay", "t2_star", "motion", "imaging"]
    assert any(t.get_text().startswith("not declared") for t in ax.texts)
    assert any(t.get_text().startswith("no effect resolved") for t in ax.texts), "motion adds nothing"
    assert "what if" in what_if.get_xlabel()
    legend = _texts(ax.get_legend().get_texts())
    assert {"all sources together", "noiseless baseline"} <= set(legend)
    assert any(getattr(c, "errorbar", None) is not None for c in ax.containers), "Monte Carlo error bars"
    _non_blank(figure_bytes(fig, dpi=40))


def test_budget_chart_from_the_command_line(tmp_path):
    from seqlang.cli import main
    out = tmp_path / "budget.png"
    assert main(["budget", str(PROGRAMS / "rabi_ramsey.seq"), "--shots", "4", "-o", str(out), "--what-if"]) == 0
    _non_blank(out.read_bytes())


def test_plot_command_takes_the_simulation_options(tmp_path, capsys):
    from seqlang.cli import main
    out = tmp_path / "c.png"
    code = main(["plot", str(PROGRAMS / "bell_pair.seq"), "--what", "correlators", "--noise", "intensity",
                 "--shots", "8", "--seed", "5", "-o", str(out)])
    assert code == 0
    _non_blank(out.read_bytes())
    assert main(["plot", str(PROGRAMS / "bell_pair.seq"), "--what", "populations", "--noise", "nonsense",
                 "-o", str(out)]) == 2
    assert "unknown noise source" in capsys.readouterr().err


# ---- which sources a rig leaves undeclared ------------------------------------------
def test_undeclared_sources_of_the_demo_programs():
    from seqlang.sim.declared import not_declared
    bell = not_declared(seqlang.load(str(PROGRAMS / "bell_pair.seq")))
    assert set(bell) == {"scattering", "imaging"}
    assert bell["imaging"] == "no image in the sequence"
    held = not_declared(seqlang.load(str(PROGRAMS / "hold_and_image.seq")))
    assert held["decay"] == held["doppler"] == "no Rydberg pulse in the sequence"
    assert "imaging" not in held and "t2_star" not in held and "preparation" not in held


def test_scattering_is_declared_once_the_legs_have_rabi_frequencies(tmp_path):
    from seqlang.sim.declared import not_declared
    rig = (PROGRAMS / "millpond.rig").read_text(encoding="utf-8")
    rig = rig.replace("    intermediate 900 MHz\n", "    intermediate 900 MHz\n    lower_rabi 90 MHz\n"
                      "    upper_rabi 26 MHz\n", 1)
    (tmp_path / "millpond.rig").write_text(rig, encoding="utf-8")
    shutil.copy(PROGRAMS / "bell_pair.seq", tmp_path / "bell_pair.seq")
    assert set(not_declared(seqlang.load(str(tmp_path / "bell_pair.seq")))) == {"imaging"}


def test_a_crowded_lane_is_drawn_as_plain_boxes(tmp_path):
    shutil.copy(PROGRAMS / "millpond.rig", tmp_path / "millpond.rig")
    (tmp_path / "many.seq").write_text('use "millpond.rig"\nsite d = na at (0, 0) um\n'
                                       "sequence many {\n  repeat 450 {\n    pulse mw_na area pi\n  }\n}\n")
    ax = timeline_figure(seqlang.load(str(tmp_path / "many.seq")).checked).axes[0]
    assert "450 events" in {t.get_text() for t in ax.texts}
    matplotlib.pyplot.close("all")


def test_hold_rows_get_no_lane(tmp_path):
    """Hold rows (a long wait cut to the duration counter) play nothing on any output."""
    rig = (PROGRAMS / "millpond.rig").read_text(encoding="utf-8").replace("counter_bits 32", "counter_bits 24")
    (tmp_path / "millpond.rig").write_text(rig, encoding="utf-8")
    (tmp_path / "wait.seq").write_text('use "millpond.rig"\nsite d = na at (0, 0) um\nsequence w {\n'
                                       "  pulse mw_na area pi/2\n  wait 1 s\n  pulse mw_na area pi/2\n}\n")
    checked = seqlang.load(str(tmp_path / "wait.seq")).checked
    assert "sequencer" in checked.plan.ports
    assert [lane.port for lane in lanes(checked)] == ["awg0.1"]
    matplotlib.pyplot.close("all")
