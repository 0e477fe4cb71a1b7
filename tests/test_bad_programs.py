"""Every bad program in tests/bad/ is rejected with the exact diagnostics in its .expected file.

Each case is `NAME.seq` (some use a bad `NAME.rig`) beside `NAME.expected`, which holds
one `path:line:col: error: message` line per diagnostic, checked by hand. The checker
runs through the command line, as a user would run it, from inside tests/bad.
"""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

BAD = Path(__file__).parent / "bad"
CASES = sorted(path.stem for path in BAD.glob("*.expected"))


def _check(name: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "seqlang", "check", f"{name}.seq"],
                          cwd=BAD, capture_output=True, text=True, timeout=120)


def _expected_lines(name: str) -> list[str]:
    text = (BAD / f"{name}.expected").read_text(encoding="utf-8")
    return [line for line in text.splitlines() if line.strip()]


def test_corpus_is_large_enough():
    """The brief asks for at least 35 cases, several with more than one error."""
    assert len(CASES) >= 35
    assert sum(len(_expected_lines(name)) > 1 for name in CASES) >= 3


@pytest.mark.parametrize("name", CASES)
def test_bad_program_is_rejected_with_expected_diagnostics(name):
    result = _check(name)
    assert result.returncode == 1, result.stdout + result.stderr
    assert "Traceback" not in result.stdout + result.stderr
    reported = [line for line in result.stderr.splitlines() if ": error: " in line and not line.startswith(" ")]
    assert reported == _expected_lines(name)
    assert any(line.strip() and set(line.strip()) == {"^"} for line in result.stderr.splitlines()), \
        "every diagnostic is shown with a caret under the source"
    count = len(reported)
    assert f"{count} error{'s' if count != 1 else ''}" in result.stderr
