"""The result store: a labelled N-dimensional xarray dataset in DIR/results.zarr.

Dimensions are the scan's (one per scan, or per lockstep group), coordinates
the scanned values in the units they were written in, data variables the
reported numbers with ``NAME_error`` beside them, and attributes the units and
the provenance. The store is a Zarr directory (format 2) with one chunk per point,
so each worker writes its own point's chunks and no two writers share a file;
every chunk file is replaced atomically, and ``point_done`` is set only after a
point's numbers are in, so an interrupted scan (Ctrl-C or kill -9) loses at most
the points in flight. Read it with ``xarray.open_zarr``.
"""
from __future__ import annotations

import json
import math
import os
import shutil

import numpy as np

from .. import __version__
from ..program.scans import ScanSpace
from .seeds import RULE, point_seed

STORE = "results.zarr"
NOTE = ("model prediction for the played (tick-quantized) timeline of each point; not a guarantee of the "
        "apparatus. The timing tables in tables/ drive lasers, RF and electrodes: review them before use "
        "and follow local safety rules.")


class StoreMismatch(Exception):
    """An existing store was made from other inputs or options."""


def dims(space: ScanSpace) -> tuple[str, ...]:
    """One dimension per group, named after its first scan."""
    return tuple(space.axes[g[0]].name for g in space.groups)


def _chunks(shape: tuple[int, ...]) -> tuple[int, ...]:
    return tuple(1 for _ in shape)  # one point per chunk: writers never share a chunk file


def _lazy(shape, fill, dtype):
    import dask.array as da
    return da.full(shape, fill, dtype=dtype, chunks=_chunks(shape) or ())


def create(path: str, space: ScanSpace, seed: int, attrs: dict) -> None:
    """Write the empty store: coordinates, seeds, point indices, no numbers yet."""
    import xarray as xr
    names, shape = dims(space), space.shape
    coords = {}
    for group, dim in zip(space.groups, names):
        for k in group:
            axis = space.axes[k]
            coords[axis.name] = (dim, [axis.shown(v) for v in axis.values],
                                 {"units": axis.unit or "1", "long_name": axis.name,
                                  "si_factor": axis.factor, "spacing": axis.spacing})
    index = np.arange(space.count, dtype=np.int64).reshape(shape)
    seeds = np.array([point_seed(seed, i) for i in range(space.count)], dtype=np.int64).reshape(shape)
    data = {"point_index": (names, index, {"long_name": "point index (tables/<index>/)"}),
            "point_seed": (names, seeds, {"long_name": "simulator seed of the point", "rule": RULE}),
            "point_done": (names, _lazy(shape, 0, np.int8), {"long_name": "1 once the point is stored"})}
    ds = xr.Dataset(data, coords=coords, attrs=attrs)
    encoding = {name: {"chunks": _chunks(shape)} for name in data}
    # Built beside and renamed into place: a store either is whole or is not there at all.
    partial = f"{path}.partial-{os.getpid()}"
    shutil.rmtree(partial, ignore_errors=True)
    ds.to_zarr(partial, mode="w-", compute=False, zarr_format=2, consolidated=True, encoding=encoding)
    _fill_eager(partial, ds)
    os.rename(partial, path)


def _fill_eager(path: str, ds) -> None:
    """xarray with compute=False skips numpy-backed variables' data; write them now."""
    import zarr
    group = zarr.open_group(path, mode="r+", zarr_format=2)
    for name in ("point_index", "point_seed"):
        group[name][...] = ds[name].values


def fingerprint_of(path: str) -> str | None:
    """The inputs' fingerprint an existing store was made with, or None if there is no store."""
    if not os.path.isdir(path):
        return None
    import zarr
    try:
        return zarr.open_group(path, mode="r", zarr_format=2).attrs.get("scan_fingerprint")
    except Exception:  # an unreadable directory is not our store
        raise StoreMismatch(f"{path} exists but is not a seqlang result store") from None


def done_mask(path: str) -> np.ndarray:
    """Flat boolean array: which points are stored."""
    import zarr
    return np.asarray(zarr.open_group(path, mode="r", zarr_format=2)["point_done"][...]).ravel() == 1


def add_variables(path: str, space: ScanSpace, numbers: dict) -> None:
    """Declare (NaN-filled, no chunk written) every number of `numbers` not yet in the store."""
    import xarray as xr
    import zarr
    group = zarr.open_group(path, mode="r", zarr_format=2)
    have, attrs = set(group.array_keys()), dict(group.attrs)
    names = [n for n in numbers if n not in have]
    if not names:
        return
    shape, dim_names = space.shape, dims(space)
    data = {n: (dim_names, _lazy(shape, math.nan, np.float64), _attributes(n, numbers)) for n in names}
    encoding = {n: {"chunks": _chunks(shape)} for n in names}
    xr.Dataset(data, attrs=attrs).to_zarr(path, mode="a", compute=False, zarr_format=2, consolidated=True, encoding=encoding)
    _ARRAYS.clear()


_ARRAYS: dict[str, dict] = {}  # per process: store path → its arrays, opened once


def write_point(path: str, position: tuple[int, ...], numbers: dict) -> bool:
    """Write one point's numbers, then its done flag; False (nothing written) if a number has
    no variable in the store yet."""
    from zarr.core.sync import sync
    arrays = _ARRAYS.get(path)
    if arrays is None or not set(numbers) <= set(arrays):
        arrays = _ARRAYS[path] = sync(_open_arrays(path))
        if not set(numbers) <= set(arrays):
            return False
    sync(_put(arrays, position, numbers))
    sync(_put(arrays, position, {"point_done": 1}))
    return True


async def _open_arrays(path: str) -> dict:
    import zarr.api.asynchronous as zarr_async
    group = await zarr_async.open_group(path, mode="r+", zarr_format=2)
    return {name: array async for name, array in group.arrays()}


async def _put(arrays: dict, position: tuple[int, ...], values: dict) -> None:
    import asyncio
    # All of a point's chunks in one round trip: one small file each, written concurrently.
    await asyncio.gather(*(arrays[n].setitem(position, np.asarray(v, dtype=arrays[n].dtype))
                           for n, v in values.items()))


def _attributes(name: str, numbers: dict) -> dict:
    if name.endswith("_error"):
        return {"units": "1", "long_name": f"standard error of {name[:-6]}"}
    attrs = {"units": "1", "long_name": _long_name(name)}
    if f"{name}_error" in numbers:
        attrs["ancillary_variables"] = f"{name}_error"
    return attrs


def _long_name(name: str) -> str:
    kind, _, rest = name.partition("_")
    words = {"fidelity": "fidelity to the expected state of", "rydberg": "residual Rydberg population of",
             "loss": "loss probability of", "bright": "P(bright) of record/site", "level": "population of level/site"}
    if kind.startswith("P") and kind[1:].isdigit():
        return f"population of |{kind[1:]}> of {rest}"
    return f"{words.get(kind, kind)} {rest}"


def provenance(program, options: dict, fingerprint: str) -> dict:
    """Attributes: tool, sources and their hashes, scan options, seeds rule, a caution."""
    base = os.path.dirname(os.path.abspath(program.path))
    rel = lambda p: os.path.relpath(os.path.abspath(p), base).replace(os.sep, "/")
    return {"tool": "seqlang", "version": __version__, "format": "seqlang-scan/1",
            "sequence": rel(program.path), "rig": rel(program.rig.path),
            "sources": json.dumps({rel(p): h for p, h in sorted(program.sources.items())}, sort_keys=True),
            "options": json.dumps(options, sort_keys=True), "seed_rule": RULE,
            "scan_fingerprint": fingerprint, "note": NOTE}


def open_dataset(path: str):
    """The store as an xarray Dataset (read lazily, without dask: one chunk per point would
    make a large task graph)."""
    import xarray as xr
    return xr.open_zarr(path, consolidated=True, chunks=None)
