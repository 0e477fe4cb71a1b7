"""Atomic writes of one file and of a whole set of files.

A reader sees the old file (or set) or the new one, never a mix: a single file
is written to a temporary name beside it and renamed over it; a set of files
is written into a staging folder beside the target folder and exchanged with
it in one rename (Linux `renameat2(RENAME_EXCHANGE)`), so a run killed at any
moment leaves the old set or the new set, whole. Files get the modes that the
user's umask gives (no private 0600 files that the sequencer's account cannot
read). Every failure is an :class:`OutputError` with a plain message.
"""
from __future__ import annotations

import ctypes
import ctypes.util
import errno
import os
import secrets
import shutil
import stat

STAGING, RETIRED = "seqlang-new", "seqlang-old"


class OutputError(Exception):
    """An output could not be written (disk full, read-only, a file in the way...)."""


def write_bytes(path: str, data: bytes) -> None:
    """Replace the file `path` with `data` atomically."""
    path = os.path.abspath(path)
    if os.path.isdir(path):
        raise OutputError(f"cannot write `{path}`: it is a directory")
    temporary = os.path.join(os.path.dirname(path), f".{os.path.basename(path)}.{_token()}.tmp")
    try:
        _write_file(temporary, data)
        os.replace(temporary, path)
    except OSError as exc:
        _remove(temporary)
        raise OutputError(f"cannot write `{path}`: {_reason(exc)}") from None
    except BaseException:
        _remove(temporary)
        raise


def write_text(path: str, text: str) -> None:
    write_bytes(path, text.encode("utf-8"))


def write_set(directory: str, files: dict[str, bytes]) -> list[str]:
    """Replace the folder `directory` by one holding exactly `files` (name → bytes).

    Other regular files already in the folder are kept (hard-linked into the
    new set); a folder holding sub-folders of its own is refused rather than
    replaced. Returns the paths written.
    """
    target = os.path.abspath(directory)
    _refuse_unsuitable(target, files)
    parent, base = os.path.split(target)
    try:
        os.makedirs(parent, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create `{parent}`: {_reason(exc)}") from None
    _clean_leftovers(parent, base)
    staging = os.path.join(parent, f".{base}.{STAGING}-{os.getpid()}-{_token()}")
    try:
        _stage(staging, target, files)
        _switch(staging, target)
    except OSError as exc:
        _remove_tree(staging)
        raise OutputError(f"cannot write `{target}`: {_reason(exc)}") from None
    except BaseException:
        _remove_tree(staging)
        raise
    _remove_tree(staging)  # after the exchange it holds the old set
    return [os.path.join(directory, name) for name in files]


def _refuse_unsuitable(target: str, files: dict[str, bytes]) -> None:
    if os.path.lexists(target) and not os.path.isdir(target):
        raise OutputError(f"cannot write the tables into `{target}`: it is a file, not a directory")
    if os.path.islink(target):
        raise OutputError(f"cannot write the tables into `{target}`: it is a symbolic link; "
                          "name the directory itself")
    here = os.path.realpath(os.getcwd())
    if here == os.path.realpath(target) or here.startswith(os.path.realpath(target) + os.sep):
        raise OutputError(f"cannot write the tables into `{target}`: it holds the current directory; "
                          "give the tables a directory of their own")
    if os.path.isdir(target):
        foreign = [e.name for e in os.scandir(target)
                   if e.name not in files and not e.is_file(follow_symlinks=False)]
        if foreign:
            raise OutputError(f"cannot write the tables into `{target}`: it holds "
                              f"{', '.join(sorted(foreign)[:5])}, which seqlang did not write; "
                              "give the tables a directory of their own")


def _stage(staging: str, target: str, files: dict[str, bytes]) -> None:
    """Fill the staging folder: the new files, plus hard links to the user's own files."""
    os.mkdir(staging, 0o777)  # the umask applies
    for name, data in files.items():
        _write_file(os.path.join(staging, name), data)
    if os.path.isdir(target):
        for entry in os.scandir(target):
            if entry.name not in files and entry.is_file(follow_symlinks=False):
                os.link(entry.path, os.path.join(staging, entry.name))
    _fsync_dir(staging)


def _switch(staging: str, target: str) -> None:
    """Put the staging folder in the target's place in one step."""
    if not os.path.isdir(target):
        os.rename(staging, target)
    elif not _exchange(staging, target):
        # No atomic exchange on this system: two renames, with a short window
        # in which the old set sits under the retired name.
        retired = staging.replace(STAGING, RETIRED)
        os.rename(target, retired)
        os.rename(staging, target)
        os.rename(retired, staging)
    _fsync_dir(os.path.dirname(target))


def _exchange(a: str, b: str) -> bool:
    """Swap two paths atomically (Linux renameat2); False where unsupported."""
    renameat2 = getattr(_libc(), "renameat2", None)
    if renameat2 is None:
        return False
    at_fdcwd, rename_exchange = -100, 2
    if renameat2(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP):
        return False
    raise OSError(code, os.strerror(code), b)


def _libc():
    try:
        return ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6", use_errno=True)
    except OSError:
        return None


def _clean_leftovers(parent: str, base: str) -> None:
    """Remove staging folders of earlier runs that were killed (their process is gone)."""
    prefixes = (f".{base}.{STAGING}-", f".{base}.{RETIRED}-")
    try:
        entries = list(os.scandir(parent))
    except OSError:
        return
    for entry in entries:
        if entry.name.startswith(prefixes) and not _alive(entry.name):
            _remove_tree(entry.path)


def _alive(name: str) -> bool:
    try:
        pid = int(name.rsplit("-", 2)[-2])
        os.kill(pid, 0)
    except (ValueError, IndexError, ProcessLookupError):
        return False
    except PermissionError:
        return True
    return True


def _write_file(path: str, data: bytes) -> None:
    handle = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)  # the umask applies
    with os.fdopen(handle, "wb") as out:
        out.write(data)
        out.flush()
        os.fsync(out.fileno())


def _fsync_dir(path: str) -> None:
    try:
        handle = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(handle)
    except OSError:
        pass
    finally:
        os.close(handle)


def _remove(path: str) -> None:
    try:
        os.unlink(path)
    except OSError:
        pass


def _remove_tree(path: str) -> None:
    if os.path.lexists(path) and stat.S_ISDIR(os.lstat(path).st_mode):
        shutil.rmtree(path, ignore_errors=True)


def _token() -> str:
    return secrets.token_hex(4)


def _reason(exc: OSError) -> str:
    return exc.strerror or str(exc)
