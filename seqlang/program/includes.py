"""Which files `use` and `import` may read, and reading them with bounds.

A sequence file from a colleague must not be able to read (and quote into an
editor) a file elsewhere on the machine. So an include is read only if

* its name, and the real file it leads to after symbolic links, end in the
  extension of its kind (`.rig` for `use`, `.seq` for `import`), and
* the real file lies in the directory of the top-level file or below it, or
  in a directory the user declared (`seqlang --rig-dir DIR`, or
  `$SEQLANG_RIG_PATH`, a list separated like `$PATH`).

Anything else is refused before it is opened, so no line of it can reach a
message. Every source is read only if it is a regular file of at most
:data:`MAX_SOURCE_BYTES`.
"""
from __future__ import annotations

import os
import stat

RIG_PATH_VARIABLE = "SEQLANG_RIG_PATH"
MAX_SOURCE_BYTES = 64 * 2**20
_KINDS = {".rig": "`use` reads rig files (`*.rig`)", ".seq": "`import` reads sequence files (`*.seq`)",
          ".csv": "`lattice … from` reads trap files (`*.csv`)"}


class FileRefused(OSError):
    """A source that is not a regular file, or too large to be a program."""


def allowed_roots(main_path: str) -> list[str]:
    """The directories whose files (and subfolders' files) includes may read."""
    declared = [p for p in os.environ.get(RIG_PATH_VARIABLE, "").split(os.pathsep) if p]
    return [os.path.realpath(os.path.dirname(os.path.abspath(main_path)))] + \
        [os.path.realpath(p) for p in declared]


def refusal(main_path: str, written: str, target: str, extensions: tuple[str, ...]) -> str | None:
    """Why the include written as `written` (found at `target`) may not be read, or None."""
    kind = _KINDS[extensions[0]]
    if "\x00" in written:  # no file system takes it; os.path would raise
        return "a file name cannot hold a null byte"
    if not written.endswith(extensions):
        return f"{kind}; `{_short(written)}` is not one"
    real = os.path.realpath(target)
    if os.path.exists(real) and not real.endswith(extensions):
        return f"{kind}; `{_short(written)}` leads to a file that is not one"
    roots = allowed_roots(main_path)
    if not any(real == root or real.startswith(root.rstrip(os.sep) + os.sep) for root in roots):
        declared = " or a declared rig directory" if roots[1:] else ""
        return (f"`{_short(written)}` lies outside the folder of `{os.path.basename(main_path)}`"
                f"{declared}; includes are read only from there and below (declare another "
                f"directory with `seqlang --rig-dir DIR` or ${RIG_PATH_VARIABLE})")
    return None


def read_source(path: str) -> bytes:
    """The bytes of a source file; FileRefused unless it is a regular file of sane size."""
    handle = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    try:
        info = os.fstat(handle)
        if not stat.S_ISREG(info.st_mode):
            raise FileRefused(f"`{_short(path)}` is not a regular file")
        if info.st_size > MAX_SOURCE_BYTES:
            raise FileRefused(f"`{_short(path)}` is {info.st_size / 2**20:.0f} MiB; a source file may "
                              f"hold at most {MAX_SOURCE_BYTES // 2**20} MiB")
        with os.fdopen(handle, "rb", closefd=False) as stream:
            return stream.read(MAX_SOURCE_BYTES + 1)
    finally:
        os.close(handle)


def _short(text: str, limit: int = 120) -> str:
    return text if len(text) <= limit else text[:limit] + f"… ({len(text)} characters)"
