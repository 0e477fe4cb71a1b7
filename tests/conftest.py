"""Shared helpers for the compiler tests: a small invented rig, program files, golden files.

Golden files live in tests/golden/; run with ``SEQLANG_UPDATE_GOLDEN=1`` to rewrite them,
then read the diff before committing: a golden file is only as good as its review.
"""
from __future__ import annotations

import os
from pathlib import Path

import pytest

TESTS = Path(__file__).resolve().parent
ROOT = TESTS.parent
GOLDEN = TESTS / "golden"
UPDATE_GOLDEN = os.environ.get("SEQLANG_UPDATE_GOLDEN") == "1"

# An invented bench for unit tests (not a real apparatus). Latencies, gates and limits are
# chosen so that each one shows up in the hardware plan: tick 2 ns.
BENCH_RIG = """\
rig bench {
  tick 2 ns
  species na = Na23 { rydberg 58S1/2 }
  species cs = Cs133 { rydberg 62S1/2 }
  drive mw_na microwave na { rabi 25 kHz  detuning -100 kHz .. 100 kHz  port awg0.1  latency 100 ns }
  drive mw_cs microwave cs { rabi 20 kHz  port awg0.2 }
  drive ryd_na rydberg na { rabi 1 MHz  reach all  port awg1.1  gate ttl.4  gate_lead 100 ns
                            gate_lag 40 ns  latency 400 ns  rise 20 ns  sample_rate 500 MHz }
  drive ryd_cs rydberg cs { rabi 2 MHz  reach each  port awg1.2  gate ttl.5  gate_lead 20 ns
                            gate_lag 20 ns  latency 300 ns }
  image na { port ttl.8  duration 10 ms  latency 1 us }
  image cs { port ttl.9  duration 10 ms }
  port shutter = ttl.12 { kind digital  latency 1 us }
  port coil = dac.3 { kind analog  range -2 A .. 2 A }
}
"""

BENCH_SITES = """\
use "bench.rig"
site a = na at (0, 0) um
site b = na at (4, 0) um
site h = cs at (0, 5) um
site g = cs at (4, 5) um
"""


def write_program(tmp_path: Path, seq_text: str, rig_text: str | None = None,
                  name: str = "case.seq", extra: dict[str, str] | None = None) -> str:
    """Write `seq_text` (and the rig, default the bench rig) into tmp_path; return the .seq path."""
    (tmp_path / "bench.rig").write_text(BENCH_RIG if rig_text is None else rig_text, encoding="utf-8")
    for relative, text in (extra or {}).items():
        (tmp_path / relative).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / relative).write_text(text, encoding="utf-8")
    path = tmp_path / name
    path.write_text(seq_text, encoding="utf-8")
    return str(path)


def bench_program(tmp_path: Path, body: str, tail: str = "") -> str:
    """A sequence on the bench sites: `body` goes inside ``sequence s { ... }``."""
    return write_program(tmp_path, f"{BENCH_SITES}sequence s {{\n{body}\n}}\n{tail}")


def check_golden(name: str, actual: str | bytes) -> None:
    """Compare with tests/golden/<name>; rewrite it instead when SEQLANG_UPDATE_GOLDEN=1."""
    path = GOLDEN / name
    data = actual.encode("utf-8") if isinstance(actual, str) else actual
    if UPDATE_GOLDEN:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(data)
        return
    assert path.exists(), f"missing golden file {path}; run with SEQLANG_UPDATE_GOLDEN=1 and review it"
    expected = path.read_bytes()
    if isinstance(actual, str):
        assert actual == expected.decode("utf-8"), f"{name} differs from its golden file"
    else:
        assert data == expected, f"{name} differs from its golden file"


@pytest.fixture
def bench(tmp_path):
    """Factory: ``bench(body, tail="")`` writes a bench program and returns its path."""
    return lambda body, tail="": bench_program(tmp_path, body, tail)
