"""Golden timing tables of two demo programs: compile into tmp and compare byte for byte.

Set SEQLANG_UPDATE_GOLDEN=1 to rewrite the golden files after a deliberate change
(then review the diff before committing it).
"""
from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

import seqlang

ROOT = Path(__file__).resolve().parent.parent
GOLDEN = Path(__file__).parent / "golden"
PROGRAMS = ("rabi_ramsey", "hold_and_image")
TABLES = ("timing.csv", "timing.json")


def _compile(name: str, tmp_path: Path) -> Path:
    """Compile a copy of the demo programs so that paths and hashes are those of the sources."""
    source = tmp_path / "programs"
    shutil.copytree(ROOT / "programs", source)
    out = tmp_path / "out"
    seqlang.load(str(source / f"{name}.seq")).write_tables(str(out))
    return out


@pytest.mark.parametrize("table", TABLES)
@pytest.mark.parametrize("name", PROGRAMS)
def test_tables_match_golden(name, table, tmp_path):
    produced = (_compile(name, tmp_path) / table).read_text(encoding="utf-8")
    golden = GOLDEN / name / table
    if os.environ.get("SEQLANG_UPDATE_GOLDEN") == "1":
        golden.parent.mkdir(parents=True, exist_ok=True)
        golden.write_text(produced, encoding="utf-8")
    assert golden.exists(), f"run with SEQLANG_UPDATE_GOLDEN=1 to create {golden}"
    assert produced == golden.read_text(encoding="utf-8")
