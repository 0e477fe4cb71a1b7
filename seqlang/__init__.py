"""seqlang: write, check, compile and simulate pulse sequences for two-species atom arrays."""
from __future__ import annotations

__version__ = "0.1.0"

from .api import Sequence, load, scan  # noqa: E402
from .lang.diagnostics import SeqlangError  # noqa: E402

__all__ = ["Sequence", "SeqlangError", "load", "scan", "__version__"]


def simulate(source, **options):
    """Simulate a sequence file or loaded :class:`Sequence`; see :mod:`seqlang.sim`.

    Options: ``noise`` ("off", "all" or sources), ``shots``, ``seed``, ``engine`` ("auto",
    "fast", "trajectories", "lindblad", "qutip"), ``truncate``, ``repetitions``, ``ladder``,
    ``interactions_hz``, ``history``, ``progress``, ``memory_limit``; each is described in
    :func:`seqlang.sim.api.simulate`. An unknown option is a TypeError listing the known ones.
    """
    from .sim.api import simulate as _simulate
    return _simulate(source, **options)


__all__.append("simulate")
