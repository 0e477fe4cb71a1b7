"""One self-contained HTML report per run, and the notebook views of results."""
from .build import build_report, write_report

__all__ = ["build_report", "write_report"]
