"""Lattice layouts: site positions and indices of the generated arrays, in SI units.

Each kind is a Bravais lattice (with a two-site basis for the honeycomb), written
with **offset rows** so that a `size (n1, n2)` array has a rectangular outline:

| kind | sites of cell (i, j) | nearest neighbours |
|---|---|---|
| `square` | (i·a, j·a) | 4 at a |
| `rectangular` | (i·ax, j·ay) | 2 at min(ax, ay) (4 when ax = ay) |
| `triangular` | ((i + (j mod 2)/2)·a, j·a·√3/2) | 6 at a |
| `hexagonal` (honeycomb) | A = ((i + (j mod 2)/2)·√3a, j·3a/2), B = A + (0, a) | 3 at a |

The pitch a is the nearest-neighbour distance in every kind (Ashcroft & Mermin,
Solid State Physics, 1976, ch. 4). Positions are then rotated about the
origin of the lattice frame and shifted by `origin`. Everything is vectorised
with numpy, so a layout of 10⁵ sites takes milliseconds.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

KINDS = ("square", "rectangular", "triangular", "hexagonal")
PATTERNS = ("uniform", "checkerboard", "rows", "columns", "sublattice")
MAX_SITES = 100_000  # per lattice: far above any tweezer array, far below memory trouble


@dataclass(frozen=True)
class Cell:
    """The lattice frame: pitch along each axis, row offset and a basis (in pitches)."""

    step: tuple[float, float]  # cell size along x and y (m)
    row_shift: float  # x offset of odd rows (m)
    basis: tuple[tuple[float, float], ...]  # site offsets within a cell (m)


def cell(kind: str, pitch: tuple[float, float]) -> Cell:
    """The cell of a lattice kind with nearest-neighbour distance `pitch` (ax, ay)."""
    ax, ay = pitch
    if kind in ("square", "rectangular"):
        return Cell((ax, ay), 0.0, ((0.0, 0.0),))
    if kind == "triangular":
        return Cell((ax, ax * math.sqrt(3) / 2), ax / 2, ((0.0, 0.0),))
    if kind == "hexagonal":
        return Cell((ax * math.sqrt(3), 1.5 * ax), ax * math.sqrt(3) / 2, ((0.0, 0.0), (0.0, ax)))
    raise ValueError(kind)


def indices(kind: str, size: tuple[int, int]) -> np.ndarray:
    """Every site's index (i, j) or (i, j, k), j slowest: shape (N, 2) or (N, 3)."""
    import numpy as np
    n1, n2 = size
    j, i = np.divmod(np.arange(n1 * n2), n1)
    if kind != "hexagonal":
        return np.stack([i, j], axis=1)
    both = np.repeat(np.stack([i, j], axis=1), 2, axis=0)
    return np.concatenate([both, np.tile([0, 1], n1 * n2)[:, None]], axis=1)


def local_positions(kind: str, pitch: tuple[float, float], index: np.ndarray) -> np.ndarray:
    """Positions (N, 2) in the lattice frame, before rotation and origin."""
    import numpy as np
    c = cell(kind, pitch)
    i, j = index[:, 0].astype(float), index[:, 1].astype(float)
    x = i * c.step[0] + (index[:, 1] % 2) * c.row_shift
    y = j * c.step[1]
    if index.shape[1] == 3:
        basis = np.asarray(c.basis)[index[:, 2]]
        x, y = x + basis[:, 0], y + basis[:, 1]
    return np.stack([x, y], axis=1)


def place(local: np.ndarray, origin: tuple[float, float, float], rotation: float) -> np.ndarray:
    """Lattice-frame positions rotated by `rotation` (rad) and shifted by `origin`: (N, 3)."""
    import numpy as np
    c, s = math.cos(rotation), math.sin(rotation)
    x = c * local[:, 0] - s * local[:, 1] + origin[0]
    y = s * local[:, 0] + c * local[:, 1] + origin[1]
    return np.stack([x, y, np.full(len(local), origin[2])], axis=1)


def species_pattern(pattern: str, index: np.ndarray) -> np.ndarray:
    """Which of the listed species (0 or 1) each site holds.

    `checkerboard`: (i + j) odd holds the second; `rows`: odd rows j; `columns`: odd
    columns i; `sublattice`: the honeycomb's B sites, or in the other kinds the
    sites with i and j both even (a sub-lattice of twice the pitch). `uniform`: all 0.
    """
    import numpy as np
    i, j = index[:, 0], index[:, 1]
    if pattern == "checkerboard":
        return (i + j) % 2
    if pattern == "rows":
        return j % 2
    if pattern == "columns":
        return i % 2
    if pattern == "sublattice":
        return index[:, 2].copy() if index.shape[1] == 3 else ((i % 2 == 0) & (j % 2 == 0)).astype(int)
    return np.zeros(len(index), dtype=int)


def site_name(lattice: str, index) -> str:
    """The name of one lattice site, as it is written: ``d[3,4]``."""
    return f"{lattice}[{','.join(str(int(k)) for k in index)}]"
