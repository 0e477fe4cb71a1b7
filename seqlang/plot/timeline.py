"""`seqlang plot --what timeline`: drives and ports over time."""
from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ..compile import envelopes  # noqa: E402
from ..compile.pipeline import Checked  # noqa: E402
from ..emit.atomic import write_bytes  # noqa: E402


def _lanes(checked: Checked) -> list[str]:
    names = []
    for e in checked.quantized.events:
        lane = e.drive or e.port
        if lane not in names:
            names.append(lane)
    return names


def plot_timeline(checked: Checked, path: str) -> None:
    """One row per drive or port; pulses drawn with their envelope, scaled to the drive maximum."""
    lanes = _lanes(checked)
    fig, ax = plt.subplots(figsize=(10, 0.7 * len(lanes) + 1.5))
    scale = 1e6 if checked.quantized.duration_s < 1e-3 else 1e3
    unit = "us" if scale == 1e6 else "ms"
    for row, lane in enumerate(lanes):
        for e in (x for x in checked.quantized.events if (x.drive or x.port) == lane):
            _draw_event(ax, checked, e, row, scale)
    ax.set_yticks(range(len(lanes)), lanes)
    ax.set_xlabel(f"time ({unit})")
    ax.set_ylim(-0.5, len(lanes) - 0.3)
    ax.invert_yaxis()
    ax.set_title(f"{checked.program.name}: played timeline (tick {checked.plan.tick_s * 1e9:g} ns)")
    fig.tight_layout()
    _save(fig, path)


def _draw_event(ax, checked: Checked, e, row: int, scale: float) -> None:
    if e.kind == "pulse":
        drive = checked.program.rig.drives[e.drive]
        t = np.linspace(0, e.duration_s, 200)
        height = 0.8 * e.rabi_hz / drive.max_rabi_hz * envelopes.envelope(e.shape, e.duration_s, t)
        ax.fill_between((e.start_s + t) * scale, row, row - height, step=None, alpha=0.8)
    elif e.duration_s > 0:
        ax.broken_barh([(e.start_s * scale, e.duration_s * scale)], (row - 0.4, 0.8), alpha=0.5)
    else:
        ax.plot([e.start_s * scale] * 2, [row - 0.4, row + 0.4], color="black")


def _save(fig, path: str) -> None:
    from .formats import figure_bytes
    data = figure_bytes(fig, path)
    plt.close(fig)
    write_bytes(path, data)
