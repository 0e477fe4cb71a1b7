"""One point of a scan: resolve, check, write its tables, simulate, report numbers.

This is the task every executor runs (in this process, a pool worker or a Dask
worker). It returns a small dict, so the driver's memory does not grow with
the number of points.
"""
from __future__ import annotations

import functools
import os
import shutil
from dataclasses import dataclass

from ..compile.pipeline import check_program
from ..program.resolve import load_files, resolve_point
from .seeds import point_seed


@dataclass(frozen=True)
class Job:
    """What every point of one scan run shares."""

    path: str
    fingerprint: str  # of the sources and options; keys the parsed-file cache
    tables: str | None  # DIR/tables, or None to skip writing tables
    width: int  # digits of the point directories' names
    store: str | None = None  # DIR/results.zarr: the worker writes its point there itself
    simulate: bool = False
    noise: tuple[str, ...] = ()
    shots: int = 200
    seed: int = 1
    engine: str = "auto"
    truncate: bool = True
    repetitions: int = 200


def point_name(job_or_width, index: int) -> str:
    """The directory name of point `index` under DIR/tables, e.g. ``0007``."""
    width = job_or_width.width if isinstance(job_or_width, Job) else job_or_width
    return f"{index:0{width}d}"


@functools.lru_cache(maxsize=4)
def _loaded(path: str, fingerprint: str):
    return load_files(path)


def run_point(job: Job, index: int) -> dict:
    """Compile (and simulate) point `index`; return its index, seed and reported numbers."""
    program, diags = resolve_point(_loaded(job.path, job.fingerprint), index)
    checked = check_program(program, diags)
    if job.tables is not None:
        _write_tables(checked, os.path.join(job.tables, point_name(job, index)))
    seed = point_seed(job.seed, index)
    numbers = _simulate(job, checked, seed) if job.simulate else {}
    written = False
    if job.store is not None:
        from .store import write_point
        written = write_point(job.store, program.scans.position(index) if program.scans else (), numbers)
    return {"index": index, "seed": seed, "numbers": numbers, "written": written}


def _write_tables(checked, directory: str) -> None:
    """All three tables appear at once: written beside, then the directory renamed into place."""
    from ..emit import write_all
    if os.path.isdir(directory):  # a resumed point: rewrite in place, file by file (atomic each)
        write_all(checked, directory)
        return
    partial = f"{directory}.partial-{os.getpid()}"
    shutil.rmtree(partial, ignore_errors=True)
    write_all(checked, partial)
    try:
        os.rename(partial, directory)
    except OSError:  # another worker finished the same point first
        shutil.rmtree(partial, ignore_errors=True)


def _simulate(job: Job, checked, seed: int) -> dict[str, float]:
    from ..api import Sequence
    from ..sim.api import simulate
    result = simulate(Sequence(job.path, checked), noise=job.noise, shots=job.shots, seed=seed,
                      engine=job.engine, truncate=job.truncate)
    return numbers(result, job.repetitions)


def numbers(result, repetitions: int) -> dict[str, float]:
    """The reported numbers of one simulation, flat, with ``NAME_error`` beside each.

    Probabilities get the binomial error of `repetitions` runs of the experiment;
    the fidelity gets its Monte Carlo error over the shots when noise is sampled.
    """
    from ..sim.model import LEVELS
    from ..sim.noise import binomial_error
    out: dict[str, float] = {}

    def probability(name: str, p: float) -> None:
        out[name] = float(p)
        out[f"{name}_error"] = binomial_error(min(max(float(p), 0.0), 1.0), repetitions)

    for e in result.expectations:
        tag = "_".join(e["sites"])
        out[f"fidelity_{tag}"] = float(e["fidelity"])
        if "fidelity_error" in e:
            out[f"fidelity_{tag}_error"] = float(e["fidelity_error"])
        for bits, p in e["populations"].items():
            probability(f"P{bits}_{tag}", p)
        probability(f"rydberg_{tag}", e["residual_rydberg"])
        probability(f"loss_{tag}", e["loss"])
    for record, sites in result.records.items():
        for site, p in sites.items():
            probability(f"bright_{record}_{site}", p)
    for cluster in result.clusters:
        for site, row in zip(cluster.model.sites, cluster.populations()):
            for level, p in zip(LEVELS, row):
                probability(f"level_{level}_{site}", p)
    return out
