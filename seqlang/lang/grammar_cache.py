"""The built LALR parser, kept as JSON in a private per-user directory.

Building the parse tables from ``grammar/seqlang.lark`` takes about a third of a
start-up, so the built parser is stored — as plain JSON data, never as a pickle,
so a file can at worst fail to load, never run code — in
``$SEQLANG_CACHE_DIR/parser`` (default ``~/.cache/seqlang/parser``). The directory
is created owner-only (0700); before a file is read, the directory and the file
must be owned by the user, not writable by group or others, and not symbolic
links. Anything else (another owner, loose modes, a damaged or stale file, a
read-only home) means the tables are simply built again; nothing is read from a
shared location such as the temporary directory.
"""
from __future__ import annotations

import hashlib
import json
import os
import stat
import tempfile
from pathlib import Path
from typing import Callable

import lark
from lark import Lark
from lark.grammar import Rule
from lark.lexer import TerminalDef

FORMAT = 1  # bump when the stored form changes


def cached_lark(grammar: str, build: Callable[[], Lark]) -> Lark:
    """The parser for `grammar`: loaded from the private cache, or built (and stored)."""
    directory = _private_directory()
    if directory is None:
        return build()
    path = directory / f"grammar-{_key(grammar)}.json"
    loaded = _load(path)
    if loaded is not None:
        return loaded
    parser = build()
    _store(parser, path)
    return parser


def _key(grammar: str) -> str:
    text = json.dumps({"grammar": grammar, "lark": lark.__version__, "format": FORMAT})
    return hashlib.sha256(text.encode()).hexdigest()[:32]


def _private_directory() -> Path | None:
    from ..atoms.cache import cache_dir
    directory = cache_dir() / "parser"
    try:
        directory.mkdir(mode=0o700, parents=True, exist_ok=True)
    except OSError:
        return None
    if not _trusted(directory, stat.S_ISDIR) or not _parent_safe(directory.parent):
        return None
    return directory


def _parent_safe(parent: Path) -> bool:
    """Others must not be able to swap our directory: the parent is not writable by them,
    unless it has the sticky bit (as /tmp does)."""
    try:
        mode = os.stat(parent).st_mode
    except OSError:
        return False
    return not mode & 0o022 or bool(mode & stat.S_ISVTX)


def _trusted(path: Path, is_kind) -> bool:
    """Ours, of the right kind (no symbolic link), and writable by nobody else."""
    try:
        info = os.lstat(path)
    except OSError:
        return False
    return is_kind(info.st_mode) and info.st_uid == os.getuid() and not info.st_mode & 0o022


def _load(path: Path) -> Lark | None:
    if not _trusted(path, stat.S_ISREG):
        return None
    try:
        with open(path, encoding="utf-8") as handle:
            stored = json.load(handle)
        return Lark.load({"data": _int_keys(stored["data"]), "memo": _memo(stored["memo"])})
    except Exception:  # a damaged or foreign file: build the tables again
        return None


def _store(parser: Lark, path: Path) -> None:
    data, memo = parser.memo_serialize([TerminalDef, Rule])
    try:
        fd, temporary = tempfile.mkstemp(dir=path.parent, prefix=".grammar-", suffix=".tmp")
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            json.dump({"data": data, "memo": {str(k): v for k, v in memo.items()}}, handle)
        os.replace(temporary, path)
    except (OSError, TypeError, ValueError):
        try:
            os.unlink(temporary)
        except (OSError, UnboundLocalError):
            pass


def _memo(memo: dict) -> dict:
    return {int(k): v for k, v in memo.items()}


def _int_keys(data: dict) -> dict:
    """JSON made the parse table's integer keys (token and state numbers) strings; undo it."""
    table = data["parser"]["parser"]
    table["tokens"] = {int(k): v for k, v in table["tokens"].items()}
    table["states"] = {int(state): {int(token): tuple(action) for token, action in actions.items()}
                       for state, actions in table["states"].items()}
    return data
