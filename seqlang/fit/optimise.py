"""`seqlang optimise`: vary a sequence's `free` values to maximise the predicted fidelity.

The objective is 1 − the fidelity of the file's `expect`s (the mean over all of them,
or one chosen), simulated on the played timeline with the rig's interactions (or
given ones) and the chosen noise; each evaluation resolves the parsed files with the
trial values and runs the ordinary passes, so every trial is checked like a compiled
program. A trial that the checker rejects (a Rabi frequency above the drive's
limit, say) counts as fidelity 0. The free values are mapped to [0, 1] by their
bounds and searched with scipy.optimize:

* `simplex` — the Nelder–Mead simplex from the start values;
* `evolution` — differential evolution over the whole box (a population, seeded),
  then the simplex from its best point.

Trials run through the scan executors (`scan.executors.mapper`: this process, a
process pool, a Dask cluster): the population of each generation and the simplex's
first corners are evaluated in one map. A trial's fidelity depends only on its
values (the same noise seed for every trial), so the optimum is the same on every
executor.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..lang.diagnostics import SeqlangError

METHODS = ("simplex", "evolution")


@dataclass(frozen=True)
class Optimum:
    """The best free values (SI), their fidelity, and the number of simulations it took."""

    values: dict[str, float]
    fidelity: float
    start_fidelity: float
    evaluations: int
    params: tuple  # program.scans.FreeParam
    objective: str = "the expect"  # which expect(s) the fidelity is of, in words
    method: str = "simplex"

    def let_block(self) -> str:
        """The optimum as `let` lines, in the units the bounds were written in."""
        from ..lang import units
        lines = ["# optimised by seqlang optimise: fidelity "
                 f"{self.fidelity:.8f} (start {self.start_fidelity:.8f}) of {self.objective}"]
        for p in self.params:
            factor = units.UNITS[p.unit][0] if p.unit else 1.0
            lines.append(f"let {p.name} = {self.values[p.name] / factor:.9g}{' ' + p.unit if p.unit else ''}")
        return "\n".join(lines) + "\n"


def optimise(path: str, noise="off", shots: int = 200, seed: int = 1, engine: str = "auto",
             interactions_hz=None, tolerance: float = 1e-8, max_evaluations: int = 3000,
             expect: str | int = "all", method: str = "simplex", workers: int = 1,
             scheduler: str | None = None, generations: int = 30, population: int = 8) -> Optimum:
    """Maximise the fidelity of `expect` (`all`: their mean; a 1-based number; or the sites
    `a,b`) over the `free` values of `path`."""
    from ..program.resolve import load_files, resolve_point
    from ..scan.executors import mapper
    if method not in METHODS:
        raise ValueError(f"unknown method `{method}` (choose {', '.join(METHODS)})")
    program = resolve_point(load_files(path))[0]
    params = program.free
    if not params:
        raise ValueError(f"{path} declares no `free` value to optimise")
    chosen, objective = choose_expect(program, expect)
    trial = Trial(path, params, dict(noise=noise, shots=shots, seed=seed, engine=engine,
                                     interactions_hz=interactions_hz), chosen)
    start = np.array([(p.start - p.low) / (p.high - p.low) for p in params])
    with mapper(workers, scheduler, preload=("seqlang.fit.optimise", "seqlang.sim.api")) as map_:
        search = _Search(trial, map_)
        first = 1.0 - search.values([start])[0]
        if method == "evolution":
            start = search.evolve(seed, generations, population, tolerance)
        best_u, best_cost = search.simplex(start, tolerance, max_evaluations)
    best = trial.values(best_u)
    return Optimum(best, 1.0 - best_cost, first, search.evaluations, params, objective, method)


def choose_expect(program, expect: str | int = "all") -> tuple[tuple[int, ...], str]:
    """The indices of the chosen `expect`s and their description in words."""
    expects = program.expects
    if not expects:
        raise ValueError(f"{program.name} has no `expect`: nothing to optimise")
    names = [f"expect {', '.join(e.sites)} as {f'|{e.state}>' if e.is_ket else e.state} (line {e.span.line})"
             for e in expects]
    text = str(expect).strip()
    if text == "all":
        if len(expects) == 1:
            return (0,), f"the {names[0]}"
        return tuple(range(len(expects))), f"the mean of all {len(expects)} expects"
    if text.isdigit() and 1 <= int(text) <= len(expects):
        return (int(text) - 1,), f"the {names[int(text) - 1]}"
    sites = tuple(s.strip() for s in text.split(","))
    match = [k for k, e in enumerate(expects) if tuple(e.sites) == sites]
    if len(match) == 1:
        return (match[0],), f"the {names[match[0]]}"
    listed = "; ".join(f"{k + 1}: {n}" for k, n in enumerate(names))
    raise ValueError(f"no single expect `{text}`: choose `all`, a number or the sites of one ({listed})")


class Trial:
    """The objective, picklable for worker processes: u in [0, 1]ⁿ → 1 − fidelity."""

    def __init__(self, path, params, options, chosen):
        self.path, self.params, self.options, self.chosen = path, params, options, chosen
        self.low = np.array([p.low for p in params])
        self.span = np.array([p.high - p.low for p in params])

    def values(self, u) -> dict[str, float]:
        inside = np.clip(np.asarray(u, float), 0.0, 1.0)
        return {p.name: float(v) for p, v in zip(self.params, self.low + inside * self.span)}

    def __call__(self, u) -> float:
        u = np.asarray(u, float)
        penalty = float(np.sum((u - np.clip(u, 0.0, 1.0)) ** 2))  # outside the box: pushed back
        return 1.0 - self.fidelity(self.values(u)) + penalty

    def fidelity(self, values: dict[str, float]) -> float:
        from ..api import Sequence
        from ..compile.pipeline import check_program
        from ..program.resolve import resolve_point
        from ..sim.api import simulate
        try:
            program, diags = resolve_point(_loaded(self.path), None, values)
            checked = check_program(program, diags)
        except SeqlangError:
            return 0.0
        result = simulate(Sequence(self.path, checked), **self.options)
        return float(np.mean([result.expectations[k]["fidelity"] for k in self.chosen]))


_LOADED: dict = {}  # per process: the parsed files of each optimised path (a worker parses once)


def _loaded(path: str):
    """The parsed files, read again when any of them (the program, its rig, its imports) changed."""
    import os
    from ..program.resolve import load_files
    key = os.path.abspath(path)
    kept = _LOADED.get(key)
    if kept is None or kept[0] != _stamps(kept[1].hashes or {path: ""}):
        loaded = load_files(path)
        _LOADED.clear()
        _LOADED[key] = kept = (_stamps(loaded.hashes or {path: ""}), loaded)
    return kept[1]


def _stamps(files) -> tuple:
    import os
    out = []
    for name in sorted(files):
        try:
            stat = os.stat(name)
            out.append((name, stat.st_mtime_ns, stat.st_size))
        except OSError:
            out.append((name, None, None))
    return tuple(out)


class _Search:
    """The scipy searches over one Trial, with every batch of trials sent through `map_`."""

    def __init__(self, trial: Trial, map_):
        self.trial, self.map, self.known, self.evaluations = trial, map_, {}, 0

    def values(self, points) -> list[float]:
        """The objective at `points`, new ones evaluated in one map; results remembered."""
        keys = [tuple(np.asarray(p, float).tolist()) for p in points]
        new = list(dict.fromkeys(k for k in keys if k not in self.known))
        for key, value in zip(new, self.map(self.trial, [np.array(k) for k in new])):
            self.known[key] = value
        self.evaluations += len(new)
        return [self.known[k] for k in keys]

    def one(self, u) -> float:
        return self.values([u])[0]

    def batch(self, function, points):
        """A `workers` callable for scipy: map(function, points) through the executor."""
        return self.values(list(points))

    def simplex(self, start, tolerance, max_evaluations):
        from scipy.optimize import minimize
        corners = _simplex(start)
        self.values(corners)  # Nelder–Mead's first n + 1 evaluations, in one map
        result = minimize(self.one, start, method="Nelder-Mead",
                          options={"xatol": tolerance, "fatol": tolerance ** 2, "maxfev": max_evaluations,
                                   "initial_simplex": corners})
        return result.x, float(result.fun)

    def evolve(self, seed, generations, population, tolerance):
        from scipy.optimize import differential_evolution
        count = len(self.trial.params)
        result = differential_evolution(self.one, [(0.0, 1.0)] * count, rng=np.random.default_rng(seed),
                                        maxiter=generations, popsize=population, tol=tolerance, polish=False,
                                        updating="deferred", workers=self.batch)
        return result.x


def _simplex(start: np.ndarray) -> np.ndarray:
    """A simplex of steps of 5 % of each range (scipy's default 5 % of the value fails at 0)."""
    steps = np.where(start + 0.05 <= 1.0, 0.05, -0.05)
    return np.vstack([start] + [start + np.eye(len(start))[k] * steps[k] for k in range(len(start))])


def sequence_at(path: str, values: dict[str, float]):
    """The checked Sequence of `path` with its free values set (e.g. at the optimum)."""
    from ..api import Sequence
    from ..compile.pipeline import check_program
    from ..program.resolve import load_files, resolve_point
    program, diags = resolve_point(load_files(path), None, values)
    return Sequence(path, check_program(program, diags))
