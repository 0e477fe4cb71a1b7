"""`run_scan`: check every point, then compile (and simulate) the missing ones into DIR.

DIR/tables/<point>/   the timing tables of each point, as `seqlang compile --point`
DIR/points.csv        point index → scanned values, seed and table hashes
DIR/results.zarr      the labelled result store (see store.py)
"""
from __future__ import annotations

import csv
import hashlib
import json
import os
import shutil
import tempfile

from ..program.scans import ScanSpace
from ..sim import noise as noise_sources
from . import store
from .check import check_points
from .executors import run_points
from .progress import Progress
from .work import Job, point_name, run_point

TABLES = ("timing.csv", "timing.json", "waveforms.npz")
OPTIONS = {"simulate": False, "noise": "off", "shots": 200, "seed": 1, "engine": "auto", "truncate": True,
           "repetitions": None, "workers": None, "scheduler": None, "dask_processes": True, "resume": False,
           "only": None, "progress": None, "tables": True, "on_checked": None}
EMPTY = ScanSpace((), ())


class ScanUsageError(Exception):
    """The scan was asked for wrongly (existing output, a point outside the scan, bad options)."""


def run_scan(path: str, output: str, **options):
    """Run the scan of `path` into directory `output`; return the result Dataset."""
    unknown = set(options) - set(OPTIONS)
    if unknown:
        raise TypeError(f"unknown scan option(s): {', '.join(sorted(unknown))}")
    o = {**OPTIONS, **options}
    checked = check_points(path)
    if o["on_checked"] is not None:
        o["on_checked"](checked)  # e.g. the command line prints the warnings
    space = checked.space or EMPTY
    job = _job(path, output, checked.first.program, space, o)
    store_path = os.path.join(output, store.STORE)
    indices = _todo(store_path, space, job, o)
    progress = Progress(space.count, space.count - len(_missing(store_path)), o["progress"])
    try:
        # The first point runs here: it tells the store which numbers there are.
        for result in _chain(run_point(job, i) for i in indices[:1]):
            _keep(result, store_path, space)
            progress.step()
        for result in run_points(job, indices[1:], o["workers"], o["scheduler"], o["dask_processes"]):
            _keep(result, store_path, space)
            progress.step()
    finally:
        progress.close()
        write_points_csv(output, space, store_path, job)
    return store.open_dataset(store_path)


def _chain(results):
    yield from results


def _keep(result: dict, store_path: str, space: ScanSpace) -> None:
    """Workers store their own points; one with numbers new to the store is stored here."""
    if not result["written"]:
        store.add_variables(store_path, space, result["numbers"])
        store.write_point(store_path, space.position(result["index"]), result["numbers"])


def _job(path: str, output: str, program, space: ScanSpace, o: dict) -> Job:
    sources = noise_sources.parse_sources(o["noise"]) if isinstance(o["noise"], str) else tuple(o["noise"])
    if o["shots"] < 1:
        raise ScanUsageError("--shots must be at least 1")
    repetitions = o["repetitions"] or o["shots"]
    recorded = {"simulate": bool(o["simulate"]), "noise": list(sources), "shots": o["shots"], "seed": o["seed"],
                "engine": o["engine"], "truncate": bool(o["truncate"]), "repetitions": repetitions}
    fingerprint = _fingerprint(program, space, recorded)
    os.makedirs(output, exist_ok=True)
    tables = os.path.join(output, "tables") if o["tables"] else None
    if tables:
        os.makedirs(tables, exist_ok=True)
    _remove_partials(output, tables)
    width = max(4, len(str(space.count - 1)))
    job = Job(os.path.abspath(path), fingerprint, tables, width, os.path.abspath(os.path.join(output, store.STORE)),
              bool(o["simulate"]), sources, o["shots"], o["seed"], o["engine"], bool(o["truncate"]), repetitions)
    job_attrs = store.provenance(program, recorded, fingerprint)
    _prepare_store(os.path.join(output, store.STORE), space, o, fingerprint, job_attrs)
    return job


def _remove_partials(*directories) -> None:
    """Half-written point directories and stores of an interrupted run (never a finished one)."""
    for directory in filter(None, directories):
        for entry in os.listdir(directory):
            if ".partial-" in entry:
                shutil.rmtree(os.path.join(directory, entry), ignore_errors=True)


def _fingerprint(program, space: ScanSpace, recorded: dict) -> str:
    document = {"sources": dict(sorted(program.sources.items())), "options": recorded,
                "axes": [[a.name, list(a.values), a.unit] for a in space.axes],
                "groups": [list(g) for g in space.groups]}
    return hashlib.sha256(json.dumps(document, sort_keys=True).encode()).hexdigest()


def _prepare_store(store_path: str, space: ScanSpace, o: dict, fingerprint: str, attrs: dict) -> None:
    try:
        existing = store.fingerprint_of(store_path)
    except store.StoreMismatch as exc:
        raise ScanUsageError(str(exc)) from None
    if existing is None:
        store.create(store_path, space, o["seed"], attrs)
    elif not o["resume"]:
        raise ScanUsageError(f"{store_path} already holds a scan; add --resume to complete it, "
                             "or choose another directory")
    elif existing != fingerprint:
        raise ScanUsageError(f"{store_path} was made from other sources or options; --resume needs the "
                             "same files and the same --simulate/--noise/--shots/--seed/--engine")


def _missing(store_path: str) -> list[int]:
    return [int(i) for i, done in enumerate(store.done_mask(store_path)) if not done]


def _todo(store_path: str, space: ScanSpace, job: Job, o: dict) -> list[int]:
    missing = _missing(store_path)
    if o["only"] is None:
        return missing
    wanted = sorted(set(o["only"]))
    outside = [i for i in wanted if not 0 <= i < space.count]
    if outside:
        raise ScanUsageError(f"point {outside[0]} is outside the scan's points 0..{space.count - 1}")
    return [i for i in wanted if i in set(missing)]


def write_points_csv(output: str, space: ScanSpace, store_path: str, job: Job) -> str:
    """DIR/points.csv, one row per point (streamed to a temporary file, then renamed)."""
    done = store.done_mask(store_path)
    target = os.path.join(output, "points.csv")
    handle, temporary = tempfile.mkstemp(prefix=".seqlang-", dir=output)
    try:
        with os.fdopen(handle, "w", newline="") as out:
            writer = csv.writer(out, lineterminator="\n")
            writer.writerow(["index"] + [_header(a) for a in space.axes] + ["seed", "stored"]
                            + [f"{t.replace('.', '_')}_sha256" for t in TABLES])
            for index in range(space.count):
                writer.writerow(_row(space, index, done[index], job))
        os.replace(temporary, target)
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise
    return target


def _header(axis) -> str:
    return f"{axis.name} [{axis.unit}]" if axis.unit else axis.name


def _row(space: ScanSpace, index: int, done: bool, job: Job) -> list:
    from .seeds import point_seed
    values = space.point(index)
    hashes = [_sha256(os.path.join(job.tables, point_name(job, index), t)) if job.tables else "" for t in TABLES]
    return ([index] + [f"{a.shown(values[a.name]):.12g}" for a in space.axes]
            + [point_seed(job.seed, index), int(done)] + hashes)


def _sha256(path: str) -> str:
    if not os.path.isfile(path):
        return ""
    with open(path, "rb") as handle:
        return hashlib.sha256(handle.read()).hexdigest()
