"""A small disk cache for slow atomic-physics results.

One JSON file per key in ``$SEQLANG_CACHE_DIR`` (default ``~/.cache/seqlang``),
named ``<kind>-<hash>.json``. The hash covers the kind, the key and
``CACHE_VERSION``; bump the version when a computation changes meaning. Files are
written atomically (temporary file in the same directory, then ``os.replace``), so
two processes computing the same value never leave a half-written file.

A cache that cannot be written (read-only home, full disk) only costs time: the
value is still returned. A damaged or mismatching file is recomputed.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
from pathlib import Path
from typing import Any, Callable

CACHE_VERSION = 1
CACHE_DIR_ENV = "SEQLANG_CACHE_DIR"


def cache_dir() -> Path:
    """Directory of the cache: ``$SEQLANG_CACHE_DIR`` or ``~/.cache/seqlang``."""
    configured = os.environ.get(CACHE_DIR_ENV)
    return Path(configured) if configured else Path.home() / ".cache" / "seqlang"


def _canonical(kind: str, key: dict[str, Any]) -> str:
    return json.dumps({"kind": kind, "key": key, "version": CACHE_VERSION}, sort_keys=True)


def cache_path(kind: str, key: dict[str, Any]) -> Path:
    """File that holds (or would hold) the value for ``kind`` and ``key``."""
    digest = hashlib.sha256(_canonical(kind, key).encode()).hexdigest()[:24]
    return cache_dir() / f"{kind}-{digest}.json"


def cached(kind: str, key: dict[str, Any], compute: Callable[[], Any]) -> Any:
    """Return the stored value for (kind, key), or ``compute()`` it and store it.

    ``key`` and the computed value must be JSON-serialisable (numbers, strings,
    lists, dicts). Floats round-trip exactly, so a cached value is identical to
    a freshly computed one.

    >>> cached("demo", {"n": 60}, lambda: {"x": 1.5})   # doctest: +SKIP
    {'x': 1.5}
    """
    path = cache_path(kind, key)
    stored = _read(path, _canonical(kind, key))
    if stored is not None:
        return stored["value"]
    value = compute()
    _write_atomically(path, {"id": _canonical(kind, key), "value": value})
    return value


def cached_either(kind: str, key: dict[str, Any], other_key: dict[str, Any], compute: Callable[[], Any]) -> Any:
    """As `cached`, but a value stored under `other_key` (the same quantity asked another way,
    e.g. a symmetric pair with its atoms named the other way round) is taken too."""
    stored = _read(cache_path(kind, key), _canonical(kind, key))
    if stored is None:
        stored = _read(cache_path(kind, other_key), _canonical(kind, other_key))
    return stored["value"] if stored is not None else cached(kind, key, compute)


def _read(path: Path, identity: str) -> dict[str, Any] | None:
    try:
        stored = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    # Guard against hash collisions and hand-edited files.
    if not isinstance(stored, dict) or stored.get("id") != identity or "value" not in stored:
        return None
    return stored


def _write_atomically(path: Path, record: dict[str, Any]) -> None:
    text = json.dumps(record, sort_keys=True, indent=1) + "\n"
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=".tmp-", suffix=".json")
    except OSError:
        return  # cache not writable: the caller still gets its value
    try:
        with os.fdopen(handle, "w", encoding="utf-8") as stream:
            stream.write(text)
        os.replace(temporary, path)
    except OSError:
        _remove_quietly(temporary)


def _remove_quietly(temporary: str) -> None:
    try:
        os.unlink(temporary)
    except OSError:
        pass
