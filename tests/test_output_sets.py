"""Output sets: replaced whole or not at all, with the user's umask, failures as messages.

A compile killed at any moment (kill -9 at each step of the write) must leave
the old set or the new set, whole; a full disk, a read-only folder or `-o`
naming a file end in a message and exit 1; the tables get the modes that the
umask gives, like any other tool's output (common practice).
"""
from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from seqlang import cli
from seqlang.emit import atomic

PROGRAMS = Path(__file__).resolve().parent.parent / "programs"
SET = ("timing.csv", "timing.json", "waveforms.npz")


@pytest.fixture
def lab(tmp_path: Path) -> Path:
    shutil.copy(PROGRAMS / "millpond.rig", tmp_path / "millpond.rig")
    for name, area in (("one.seq", "pi"), ("two.seq", "pi/2")):
        (tmp_path / name).write_text(
            f'use "millpond.rig"\nsite c0 = cs at (0, 0) um\nsequence s {{\n  pulse mw_cs area {area}\n}}\n')
    return tmp_path


def _compile(lab: Path, name: str, out: str = "out") -> int:
    return subprocess.run([sys.executable, "-m", "seqlang", "compile", name, "-o", out], cwd=lab,
                          capture_output=True, text=True, timeout=120).returncode


KILLER = textwrap.dedent("""
    import os, signal, sys
    from seqlang.emit import atomic
    step = sys.argv[1]
    real = {"file": atomic._write_file, "switch": atomic._switch, "exchange": atomic._exchange}
    count = {"n": 0}
    def wrap(name):
        def inner(*args):
            if name == step:
                count["n"] += 1
                if count["n"] == 2 or step != "file":
                    os.kill(os.getpid(), signal.SIGKILL)
            return real[name](*args)
        return inner
    atomic._write_file = wrap("file")
    atomic._switch = wrap("switch")
    atomic._exchange = wrap("exchange")
    from seqlang import cli
    sys.exit(cli.main(["compile", "two.seq", "-o", "out"]))
""")


@pytest.mark.parametrize("step", ["file", "switch", "exchange"])
def test_kill_at_any_step_leaves_one_whole_set(lab, step):
    assert _compile(lab, "one.seq") == 0
    old = {name: (lab / "out" / name).read_bytes() for name in SET}
    run = subprocess.run([sys.executable, "-c", KILLER, step], cwd=lab, capture_output=True, timeout=120)
    assert run.returncode == -signal.SIGKILL
    now = {name: (lab / "out" / name).read_bytes() for name in SET}
    assert now == old, "killed before the switch: the old set, untouched"
    # The next run cleans what the killed one left and writes the new set whole.
    assert _compile(lab, "two.seq") == 0
    assert not [n for n in os.listdir(lab) if n.startswith(".")]
    assert (lab / "out" / "timing.csv").read_bytes() != old["timing.csv"]
    assert (lab / "out" / "timing.json").read_bytes() != old["timing.json"]


AFTER_SWITCH = textwrap.dedent("""
    import os, signal, sys
    from seqlang.emit import atomic
    real = atomic._switch
    def switch_then_die(*args):
        real(*args)
        os.kill(os.getpid(), signal.SIGKILL)
    atomic._switch = switch_then_die
    from seqlang import cli
    sys.exit(cli.main(["compile", "two.seq", "-o", "out"]))
""")


def test_kill_after_the_switch_leaves_the_new_set(lab):
    assert _compile(lab, "one.seq") == 0
    run = subprocess.run([sys.executable, "-c", AFTER_SWITCH], cwd=lab, capture_output=True, timeout=120)
    assert run.returncode == -signal.SIGKILL
    assert _compile(lab, "two.seq", out="reference") == 0
    for name in SET:
        assert (lab / "out" / name).read_bytes() == (lab / "reference" / name).read_bytes()
    assert [n for n in os.listdir(lab) if n.startswith(".")], "the old set waits under a staging name"
    assert _compile(lab, "two.seq") == 0
    assert not [n for n in os.listdir(lab) if n.startswith(".")], "and the next run removes it"


def test_full_disk_is_a_message_and_keeps_the_old_set(lab, monkeypatch, capsys):
    monkeypatch.chdir(lab)
    assert cli.main(["compile", "one.seq", "-o", "out"]) == 0
    old = (lab / "out" / "timing.json").read_bytes()
    calls = {"n": 0}
    real = atomic._write_file

    def fill_up(path, data):
        calls["n"] += 1
        if calls["n"] == 2:
            raise OSError(28, "No space left on device")
        real(path, data)

    monkeypatch.setattr(atomic, "_write_file", fill_up)
    assert cli.main(["compile", "two.seq", "-o", "out"]) == 1
    err = capsys.readouterr().err
    assert "No space left on device" in err and "Traceback" not in err
    assert (lab / "out" / "timing.json").read_bytes() == old
    assert not [n for n in os.listdir(lab) if n.startswith(".")]


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into read-only folders")
def test_read_only_folder_is_a_message(lab, monkeypatch, capsys):
    monkeypatch.chdir(lab)
    (lab / "locked").mkdir()
    (lab / "locked").chmod(0o500)
    try:
        assert cli.main(["compile", "one.seq", "-o", "locked/out"]) == 1
    finally:
        (lab / "locked").chmod(0o700)
    assert "cannot" in capsys.readouterr().err


def test_output_naming_a_file_is_a_message(lab, monkeypatch, capsys):
    monkeypatch.chdir(lab)
    assert cli.main(["compile", "one.seq", "-o", "one.seq"]) == 1
    assert "it is a file, not a directory" in capsys.readouterr().err
    assert (lab / "one.seq").read_text().startswith("use")


def test_a_folder_with_subfolders_of_its_own_is_not_replaced(lab, monkeypatch, capsys):
    monkeypatch.chdir(lab)
    (lab / "out" / "notes").mkdir(parents=True)
    assert cli.main(["compile", "one.seq", "-o", "out"]) == 1
    assert "which seqlang did not write" in capsys.readouterr().err
    assert (lab / "out" / "notes").is_dir()


def test_other_files_in_the_folder_are_kept(lab, monkeypatch):
    monkeypatch.chdir(lab)
    (lab / "out").mkdir()
    (lab / "out" / "logbook.txt").write_text("shift notes\n")
    assert cli.main(["compile", "one.seq", "-o", "out"]) == 0
    assert cli.main(["compile", "two.seq", "-o", "out"]) == 0
    assert (lab / "out" / "logbook.txt").read_text() == "shift notes\n"
    assert sorted(os.listdir(lab / "out")) == sorted(SET + ("logbook.txt",))


@pytest.mark.parametrize("umask", [0o022, 0o002])
def test_tables_follow_the_umask(lab, monkeypatch, umask):
    monkeypatch.chdir(lab)
    previous = os.umask(umask)
    try:
        assert cli.main(["compile", "one.seq", "-o", "out"]) == 0
        assert cli.main(["compile", "one.seq", "-o", "out"]) == 0
    finally:
        os.umask(previous)
    for name in SET:
        assert (lab / "out" / name).stat().st_mode & 0o777 == 0o666 & ~umask
    assert (lab / "out").stat().st_mode & 0o777 == 0o777 & ~umask


def test_single_file_follows_the_umask(tmp_path):
    previous = os.umask(0o022)
    try:
        atomic.write_text(str(tmp_path / "figure.svg"), "<svg/>")
    finally:
        os.umask(previous)
    assert (tmp_path / "figure.svg").stat().st_mode & 0o777 == 0o644
