"""Resource limits, long exponentials and exact numbers (no error bars where nothing is sampled)."""
from __future__ import annotations

import json
import math
import subprocess
import sys
import tracemalloc

import numpy as np
import pytest

import seqlang
from seqlang.sim import limits
from seqlang.sim.basis import reduced_basis
from seqlang.sim.engine import batched_expm

RIG = """
rig limitbench {
  tick 1 ns
  species a = Rb87 { rydberg 70S1/2  prep_error 1 % }
  drive mw_a microwave a { rabi 2 MHz  port awg0.1  amplitude_bits 32 }
  drive ryd_a rydberg a { rabi 2 MHz  reach each  port awg1.1  amplitude_bits 32 }
}
"""


def _program(tmp_path, body, sites, expect, tick="1 ns") -> str:
    (tmp_path / "l.rig").write_text(RIG.replace("tick 1 ns", f"tick {tick}\n  counter_bits 64"))
    path = tmp_path / "l.seq"
    path.write_text(f'use "l.rig"\n{sites}\nsequence l {{\n{body}\n}}\n{expect}\n')
    return str(path)


def _crowd(tmp_path, atoms: int) -> tuple[str, dict]:
    """`atoms` atoms on a ring of radius 5 µm (neighbours beyond the Le Roy radius):
    all within one blockade radius."""
    names = [f"s{k}" for k in range(atoms)]
    sites = "\n".join(f"site {n} = a at ({5 * math.cos(2 * math.pi * k / atoms):.6f}, "
                      f"{5 * math.sin(2 * math.pi * k / atoms):.6f}) um" for k, n in enumerate(names))
    interactions = {(a, b): 5e8 for i, a in enumerate(names) for b in names[i + 1:]}
    body = "pulse mw_a area pi\npulse ryd_a on " + ", ".join(names) + " area pi"
    return _program(tmp_path, body, sites, f"expect {', '.join(names[:2])} as |11>"), interactions


def test_sixteen_atoms_in_one_blockade_radius_are_refused_before_allocating(tmp_path):
    """The refusal says how many states and what would help, without building the full product."""
    path, interactions = _crowd(tmp_path, 16)
    tracemalloc.start()
    with pytest.raises(limits.SimulationLimit) as refused:
        seqlang.simulate(path, interactions_hz=interactions, noise="preparation", shots=10, truncate=False)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    message = str(refused.value)
    assert "16 atoms" in message and "product states" in message and "fewer atoms" in message
    assert peak < 200 * 2**20  # 4^16 states would be 69 GB of kets; the enumeration stops early


def test_memory_estimate_refuses_above_the_limit(tmp_path):
    path, interactions = _crowd(tmp_path, 6)
    with pytest.raises(limits.SimulationLimit, match="would need about .* What would help: fewer shots"):
        seqlang.simulate(path, interactions_hz=interactions, noise="preparation", shots=5000, memory_limit=2**20)


def test_too_many_shots_are_refused_on_the_command_line(tmp_path):
    path, _ = _crowd(tmp_path, 2)
    run = subprocess.run([sys.executable, "-m", "seqlang", "simulate", path, "--noise", "preparation",
                          "--shots", "1e7"], capture_output=True, text=True, timeout=120)
    assert run.returncode == 1 and "Traceback" not in run.stderr
    assert "10,000,000 shots" in run.stderr and "limit" in run.stderr


def test_incremental_basis_equals_the_filtered_full_product():
    import itertools
    allowed = [(0, 1, 2), (0, 1, 2, 3), (0, 1), (0, 1, 2), (0, 1, 2, 3)]
    pairs = ((0, 1), (1, 3), (0, 4))
    levels = np.array(list(itertools.product(*allowed)), dtype=np.int8)
    for i, j in pairs:
        levels = levels[~((levels[:, i] == 2) & (levels[:, j] == 2))]
    assert np.array_equal(reduced_basis(allowed, 4, pairs).levels, levels)


def test_a_pulse_of_a_billion_seconds_keeps_probabilities(tmp_path):
    """10⁹ s of Rabi flopping, with and without loss: every probability stays in [0, 1] and the
    populations sum to one (the exponential is unitary, resp. a contraction, at any norm)."""
    # A 1 µs tick keeps 10⁹ s within the 2^53 ticks where tick arithmetic is exact.
    path = _program(tmp_path, "pulse mw_a duration 1e9 s", "site q = a at (0, 0) um", "expect q as |1>", "1 us")
    result = seqlang.simulate(path, interactions_hz={})
    p = result.reduced_density(("q",)).diagonal().real
    assert np.all(p >= -1e-12) and np.all(p <= 1 + 1e-12) and p.sum() == pytest.approx(1.0, abs=1e-12)
    ryd = _program(tmp_path, "pulse mw_a area pi rabi 100 kHz\npulse ryd_a duration 1e9 s",
                   "site q = a at (0, 0) um", "expect q as |1>", "1 us")
    decayed = seqlang.simulate(ryd, interactions_hz={}, noise="decay")
    assert decayed.expectations[0]["loss"] == pytest.approx(1.0, abs=1e-9)  # τ ~ 100 µs ≪ 10⁹ s


def test_long_exponentials_of_large_blocks_are_unitary():
    """exp(−iHt) for Hermitian H with ‖H‖t ~ 10¹⁵ (eigendecomposition branch) stays unitary."""
    rng = np.random.default_rng(2)
    h = rng.normal(size=(3, 6, 6)) + 1j * rng.normal(size=(3, 6, 6))
    h = h + np.conj(np.swapaxes(h, -1, -2))
    u = batched_expm(-1j * 1e15 * h)
    assert np.abs(np.conj(np.swapaxes(u, -1, -2)) @ u - np.eye(6)).max() < 1e-9


def test_exact_runs_carry_no_error_bars_and_no_shot_count(tmp_path):
    path = _program(tmp_path, "pulse mw_a area pi/2", "site q = a at (0, 0) um", "expect q as |1>")
    run = subprocess.run([sys.executable, "-m", "seqlang", "simulate", path, "--json"], capture_output=True,
                         text=True, timeout=120)
    document = json.loads(run.stdout)
    assert document["noise"]["exact"] is True and "shots" not in document["noise"]
    e = document["expectations"][0]
    assert e["populations"]["1"] == pytest.approx(0.5, abs=1e-9)
    assert not [k for k in e if k.endswith("_error")]
    assert "site_populations_error" not in document


def test_interrupt_on_the_command_line_prints_the_finished_shots(tmp_path, monkeypatch, capsys):
    """Ctrl-C during the second chunk: the JSON of the first chunk's shots, marked interrupted,
    on every cluster alike (chunks run cluster by cluster within each chunk of shots)."""
    from seqlang import cli
    from seqlang.sim import api, runner
    real_chunk, calls = runner.Runner._chunk, []

    def interrupted_chunk(self, plan, lo, hi):
        calls.append(lo)
        if calls.count(api.SHOT_CHUNK) == 2:  # the second cluster's second chunk
            raise KeyboardInterrupt
        return real_chunk(self, plan, lo, hi)
    monkeypatch.setattr(runner.Runner, "_chunk", interrupted_chunk)
    sites = "site u = a at (0, 0) um\nsite v = a at (200, 0) um"
    path = _program(tmp_path, "pulse mw_a area pi/2\npulse ryd_a on v area pi", sites, "expect u, v as |10>")
    code = cli.main(["simulate", path, "--json", "--noise", "preparation", "--shots", str(3 * api.SHOT_CHUNK)])
    document = json.loads(capsys.readouterr().out)
    assert code == 0
    assert document["noise"]["shots"] == api.SHOT_CHUNK and "interrupted" in document["noise"]
    assert document["expectations"][0]["fidelity"] == pytest.approx(0.25, abs=0.03)  # 1/2 · 1/2
