"""seqlang: write, check, compile and simulate pulse sequences for two-species atom arrays."""
from __future__ import annotations

__version__ = "0.1.0"

from .api import Sequence, load  # noqa: E402
from .lang.diagnostics import SeqlangError  # noqa: E402

__all__ = ["Sequence", "SeqlangError", "load", "__version__"]
