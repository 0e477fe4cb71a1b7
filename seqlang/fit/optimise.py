"""`seqlang optimise`: vary a sequence's `free` values to maximise the predicted fidelity.

The objective is 1 − the fidelity of the file's first `expect`, simulated on the
played timeline with the rig's interactions (or given ones) and the chosen noise;
each evaluation resolves the parsed files with the trial values and runs the
ordinary passes, so every trial is checked like a compiled program. The free
values are mapped to [0, 1] by their bounds and searched with the Nelder–Mead
simplex (scipy.optimize; gradient-free, as the simulator is fast). A trial that
the checker rejects (a Rabi frequency above the drive's limit, say) counts as
fidelity 0.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..lang.diagnostics import SeqlangError


@dataclass(frozen=True)
class Optimum:
    """The best free values (SI), their fidelity, and the number of simulations it took."""

    values: dict[str, float]
    fidelity: float
    start_fidelity: float
    evaluations: int
    params: tuple  # program.scans.FreeParam

    def let_block(self) -> str:
        """The optimum as `let` lines, in the units the bounds were written in."""
        from ..lang import units
        lines = ["# optimised by seqlang optimise: fidelity "
                 f"{self.fidelity:.8f} (start {self.start_fidelity:.8f})"]
        for p in self.params:
            factor = units.UNITS[p.unit][0] if p.unit else 1.0
            lines.append(f"let {p.name} = {self.values[p.name] / factor:.9g}{' ' + p.unit if p.unit else ''}")
        return "\n".join(lines) + "\n"


def optimise(path: str, noise="off", shots: int = 200, seed: int = 1, engine: str = "auto",
             interactions_hz=None, tolerance: float = 1e-8, max_evaluations: int = 3000) -> Optimum:
    """Maximise the first `expect`'s fidelity over the `free` values of `path`."""
    from scipy.optimize import minimize
    from ..program.resolve import load_files, resolve_point
    loaded = load_files(path)
    params = resolve_point(loaded)[0].free
    if not params:
        raise ValueError(f"{path} declares no `free` value to optimise")
    low = np.array([p.low for p in params])
    span = np.array([p.high - p.low for p in params])
    options = dict(noise=noise, shots=shots, seed=seed, engine=engine, interactions_hz=interactions_hz)
    count = [0]

    def infidelity(u: np.ndarray) -> float:
        count[0] += 1
        inside = np.clip(u, 0.0, 1.0)
        penalty = float(np.sum((u - inside) ** 2))  # outside the bounds: held at the bound, pushed back
        values = {p.name: float(v) for p, v in zip(params, low + inside * span)}
        return 1.0 - _fidelity(path, loaded, values, options) + penalty

    start = np.array([(p.start - p.low) / (p.high - p.low) for p in params])
    first = 1.0 - infidelity(start)
    result = minimize(infidelity, start, method="Nelder-Mead",
                      options={"xatol": tolerance, "fatol": tolerance ** 2, "maxfev": max_evaluations,
                               "initial_simplex": _simplex(start)})
    best = {p.name: float(v) for p, v in zip(params, low + np.clip(result.x, 0, 1) * span)}
    return Optimum(best, 1.0 - float(result.fun), first, count[0], params)


def _simplex(start: np.ndarray) -> np.ndarray:
    """A simplex of steps of 5 % of each range (scipy's default 5 % of the value fails at 0)."""
    steps = np.where(start + 0.05 <= 1.0, 0.05, -0.05)
    return np.vstack([start] + [start + np.eye(len(start))[k] * steps[k] for k in range(len(start))])


def _fidelity(path: str, loaded, values: dict[str, float], options: dict) -> float:
    from ..api import Sequence
    from ..compile.pipeline import check_program
    from ..program.resolve import resolve_point
    from ..sim.api import simulate
    try:
        program, diags = resolve_point(loaded, None, values)
        checked = check_program(program, diags)
    except SeqlangError:
        return 0.0
    result = simulate(Sequence(path, checked), **options)
    if not result.expectations:
        raise ValueError(f"{path} has no `expect`: nothing to optimise")
    return float(result.expectations[0]["fidelity"])


def sequence_at(path: str, values: dict[str, float]):
    """The checked Sequence of `path` with its free values set (e.g. at the optimum)."""
    from ..api import Sequence
    from ..compile.pipeline import check_program
    from ..program.resolve import load_files, resolve_point
    program, diags = resolve_point(load_files(path), None, values)
    return Sequence(path, check_program(program, diags))
