"""Scans: one program, many points — checked, compiled, simulated, stored (docs/scans.md).

The package sits above the pipeline: it resolves the program's files once,
re-evaluates them per point with the ordinary passes, and owns the point index,
the per-point seeds, the result store and the executors. Nothing below it knows
about points.
"""
