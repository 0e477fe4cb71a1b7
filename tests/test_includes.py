"""`use` and `import` read only seqlang files in the program's folder (or declared ones).

Secrets on the machine must never reach a message: refused files are not even
opened, so none of their lines can be quoted under a caret.
"""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from seqlang.program import includes

PROGRAMS = Path(__file__).resolve().parent.parent / "programs"
GOOD = 'use "{rig}"\nsite c0 = cs at (0, 0) um\nsequence s {{\n  pulse mw_cs area pi\n}}\n'


def _check(cwd: Path, *args: str, env: dict | None = None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "seqlang", *args], cwd=cwd, capture_output=True,
                          text=True, timeout=120, env={**os.environ, **(env or {})})


@pytest.mark.parametrize("written", ["/etc/passwd", "../" * 12 + "etc/passwd", "passwd_link.rig"])
def test_no_line_of_a_foreign_file_is_quoted(tmp_path, written):
    os.symlink("/etc/passwd", tmp_path / "passwd_link.rig")
    (tmp_path / "a.seq").write_text(GOOD.format(rig=written))
    result = _check(tmp_path, "check", "a.seq")
    assert result.returncode == 1 and "Traceback" not in result.stderr
    secret_lines = [line for line in Path("/etc/passwd").read_text().splitlines() if line.strip()]
    assert not any(line in result.stderr for line in secret_lines)


def test_device_behind_a_rig_name_is_refused_before_reading(tmp_path):
    os.symlink("/dev/zero", tmp_path / "zero.rig")
    (tmp_path / "a.seq").write_text(GOOD.format(rig="zero.rig"))
    result = _check(tmp_path, "check", "a.seq")
    assert result.returncode == 1
    assert "leads to a file that is not one" in result.stderr


def test_declared_rig_directory_is_allowed(tmp_path):
    shared = tmp_path / "shared_rigs"
    shared.mkdir()
    shutil.copy(PROGRAMS / "millpond.rig", shared / "millpond.rig")
    work = tmp_path / "work"
    work.mkdir()
    (work / "a.seq").write_text(GOOD.format(rig=str(shared / "millpond.rig")))
    assert _check(work, "check", "a.seq").returncode == 1
    assert _check(work, "--rig-dir", str(shared), "check", "a.seq").returncode == 0
    assert _check(work, "check", "a.seq", env={"SEQLANG_RIG_PATH": str(shared)}).returncode == 0


def test_subfolders_are_allowed(tmp_path):
    (tmp_path / "rigs").mkdir()
    shutil.copy(PROGRAMS / "millpond.rig", tmp_path / "rigs" / "millpond.rig")
    (tmp_path / "a.seq").write_text(GOOD.format(rig="rigs/millpond.rig"))
    result = _check(tmp_path, "check", "a.seq")
    assert result.returncode == 0, result.stderr


def test_oversized_source_is_refused(tmp_path, monkeypatch):
    path = tmp_path / "big.seq"
    path.write_bytes(b"#" * 2048)
    monkeypatch.setattr(includes, "MAX_SOURCE_BYTES", 1024)
    with pytest.raises(includes.FileRefused, match="at most"):
        includes.read_source(str(path))


def test_fifo_is_refused(tmp_path):
    os.mkfifo(tmp_path / "pipe.seq")
    with pytest.raises(includes.FileRefused, match="not a regular file"):
        includes.read_source(str(tmp_path / "pipe.seq"))
