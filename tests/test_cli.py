"""The command line: exit codes (0 ok, 1 program errors, 2 misuse), help texts, atomic writes."""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from seqlang import cli
from seqlang.emit import atomic

PROGRAMS = Path(__file__).resolve().parent.parent / "programs"


def _run(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "seqlang", *args], cwd=cwd,
                          capture_output=True, text=True, timeout=300)


@pytest.fixture
def program_dir(tmp_path: Path) -> Path:
    """A copy of the demo rig and a small good and a small bad sequence."""
    shutil.copy(PROGRAMS / "millpond.rig", tmp_path / "millpond.rig")
    (tmp_path / "good.seq").write_text(
        'use "millpond.rig"\nsite c0 = cs at (0, 0) um\nsequence s {\n  pulse mw_cs area pi\n}\n')
    (tmp_path / "bad.seq").write_text(
        'use "millpond.rig"\nsite c0 = cs at (0, 0) um\nsequence s {\n  wait 3 MHz\n}\n')
    return tmp_path


def test_check_good_program_exits_0(program_dir):
    result = _run("check", "good.seq", cwd=program_dir)
    assert result.returncode == 0, result.stderr
    assert "good.seq: ok" in result.stdout


def test_check_bad_program_exits_1_with_location(program_dir):
    result = _run("check", "bad.seq", cwd=program_dir)
    assert result.returncode == 1
    assert "bad.seq:4:8: error: expected a duration, got a frequency" in result.stderr
    assert "Traceback" not in result.stderr


def test_missing_file_exits_2(program_dir):
    result = _run("check", "nothing.seq", cwd=program_dir)
    assert result.returncode == 2
    assert "no such file: nothing.seq" in result.stderr
    assert "Traceback" not in result.stderr


def test_compile_without_output_exits_2(program_dir):
    result = _run("compile", "good.seq", cwd=program_dir)
    assert result.returncode == 2
    assert "-o" in result.stderr


def test_compile_writes_three_tables(program_dir):
    result = _run("compile", "good.seq", "-o", "out", cwd=program_dir)
    assert result.returncode == 0, result.stderr
    assert sorted(os.listdir(program_dir / "out")) == ["timing.csv", "timing.json", "waveforms.npz"]


@pytest.mark.parametrize("command, options", [
    ("check", ["file"]),
    ("compile", ["file", "-o", "--output"]),
    ("show", ["file", "--no-pairs"]),
    ("plot", ["file", "-o", "--output", "--what"]),
])
def test_help_lists_the_options(command, options):
    result = _run(command, "--help")
    assert result.returncode == 0
    for option in options:
        assert option in result.stdout


def test_top_level_help_lists_exit_codes():
    result = _run("--help")
    assert result.returncode == 0
    assert "Exit codes: 0 ok, 1" in result.stdout.replace("\n", " ").replace("  ", " ")


def test_failed_write_keeps_the_old_file(tmp_path, monkeypatch):
    target = tmp_path / "timing.csv"
    target.write_text("old contents\n")

    def refuse(*_args, **_kwargs):
        raise OSError("disk full")

    monkeypatch.setattr(os, "replace", refuse)
    with pytest.raises(atomic.OutputError, match="disk full"):
        atomic.write_text(str(target), "new contents\n")
    assert target.read_text() == "old contents\n"
    assert os.listdir(tmp_path) == ["timing.csv"], "the temporary file is cleaned up"


def test_compile_failing_write_keeps_old_tables(program_dir, monkeypatch, capsys):
    """Through the command: a write that fails leaves the earlier tables in place."""
    monkeypatch.chdir(program_dir)
    assert cli.main(["compile", "good.seq", "-o", "out"]) == 0
    before = (program_dir / "out" / "timing.json").read_bytes()
    (program_dir / "good.seq").write_text((program_dir / "good.seq").read_text().replace("area pi", "area pi/2"))

    def refuse(*_args, **_kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(atomic, "_write_file", refuse)
    assert cli.main(["compile", "good.seq", "-o", "out"]) == 1
    assert "cannot write" in capsys.readouterr().err
    assert (program_dir / "out" / "timing.json").read_bytes() == before
    assert not [n for n in os.listdir(program_dir) if n.startswith(".")], "no staging folder left behind"


@pytest.mark.parametrize("extension, magic", [(".png", b"\x89PNG"), (".svg", b"<?xml"), (".pdf", b"%PDF")])
def test_plot_writes_the_format_its_extension_names(program_dir, monkeypatch, extension, magic):
    monkeypatch.chdir(program_dir)
    assert cli.main(["plot", "good.seq", "-o", f"timeline{extension}"]) == 0
    data = (program_dir / f"timeline{extension}").read_bytes()
    assert data.startswith(magic)
    assert cli.main(["plot", "good.seq", "-o", f"again{extension}"]) == 0
    assert (program_dir / f"again{extension}").read_bytes() == data, "no dates or ids in the figure"


def test_plot_refuses_an_unknown_extension(program_dir, monkeypatch, capsys):
    monkeypatch.chdir(program_dir)
    assert cli.main(["plot", "good.seq", "-o", "timeline.jpeg"]) == 2
    assert "use one of .png, .svg, .pdf" in capsys.readouterr().err
    assert not (program_dir / "timeline.jpeg").exists()


def test_check_takes_several_files(program_dir):
    both = _run("check", "good.seq", "bad.seq", cwd=program_dir)
    assert both.returncode == 1
    assert "good.seq: ok" in both.stdout
    assert "bad.seq:4:" in both.stderr and "1 of 2 files have errors" in both.stderr
    assert _run("check", "good.seq", "good.seq", cwd=program_dir).returncode == 0


def test_internal_error_is_told_apart_from_user_errors(program_dir, monkeypatch, capsys):
    """A bug exits 70 (EX_SOFTWARE, BSD sysexits) with a short line, not 1 and a traceback."""
    import seqlang.api

    def broken(_path):
        raise ZeroDivisionError("division by zero")

    monkeypatch.setattr(seqlang.api, "load", broken)
    monkeypatch.chdir(program_dir)
    assert cli.main(["check", "good.seq"]) == cli.EXIT_INTERNAL == 70
    err = capsys.readouterr().err
    assert "internal error: ZeroDivisionError" in err and "bug in seqlang" in err
    assert "Traceback" not in err
