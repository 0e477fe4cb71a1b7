"""Per-point random seeds, derived from the run's seed and the point's index.

Any point can be re-run alone (``--only K``) and gets the same numbers, whatever
executor ran it and in whatever order the points finished.

>>> point_seed(1, 0) == point_seed(1, 0) != point_seed(1, 1)
True
"""
from __future__ import annotations

import numpy as np

RULE = "numpy.random.SeedSequence(seed, spawn_key=(index,)).generate_state(1)[0]"


def point_seed(run_seed: int, index: int) -> int:
    """The simulator seed of point `index` (a 32-bit integer)."""
    state = np.random.SeedSequence(run_seed, spawn_key=(index,)).generate_state(1, np.uint32)
    return int(state[0])
