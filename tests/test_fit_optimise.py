"""`free` values and the optimiser: the published two-pulse CZ recovered with a very large
blockade and no noise; at finite blockade the optimum is at least as good as the published
parameters."""
from __future__ import annotations

from pathlib import Path

import pytest

import seqlang
from seqlang.fit.optimise import optimise, sequence_at
from seqlang.lang.diagnostics import SeqlangError
from tests.conftest import write_program

# A fine 1 ps tick, so that tick rounding does not move the gate parameters by 1e-3.
FINE_RIG = """rig fine {
  tick 1 ps
  counter_bits 48
  species na = Na23 { qubit clock  rydberg 58S1/2 }
  drive raman_na raman na { rabi 500 kHz  port awg0.1 }
  drive ryd_na rydberg na { rabi 1.3 MHz  reach all  detuning -5 MHz .. 5 MHz  port awg1.1 }
}
"""
CZ = """use "bench.rig"
site a = na at (0, 0) um
site b = na at (3, 0) um
let omega = 1.3 MHz
free ratio = 0.30 .. 0.45 start {ratio}
free area = 4.0 .. 4.6 start {area}
free jump = 3.6 rad .. 4.2 rad start {jump} rad
free theta = 120 deg .. 150 deg start 135 deg
sequence cz {{
  pulse raman_na area pi/2
  pulse ryd_na duration area / (2 * pi * omega) rabi omega detuning ratio * omega
  pulse ryd_na duration area / (2 * pi * omega) rabi omega detuning ratio * omega phase -jump
  pulse raman_na area pi/4 phase theta
}}
expect a, b as psi_plus
"""
PUBLISHED = {"ratio": 0.377371, "area": 4.29268, "jump": 3.90242}  # Levine et al., PRL 123, 170503 (2019)


def test_free_values_are_bound_at_their_start_and_checked(tmp_path):
    path = write_program(tmp_path, CZ.format(ratio=0.37, area=4.25, jump=3.85), FINE_RIG)
    seq = seqlang.load(path)
    assert [p.name for p in seq.program.free] == ["ratio", "area", "jump", "theta"]
    assert seq.timeline.events[1].detuning_hz == pytest.approx(0.37 * 1.3e6)
    bad = write_program(tmp_path, 'use "bench.rig"\nfree x = 2 us .. 1 us\nsequence s {\n}\n', FINE_RIG, "bad.seq")
    with pytest.raises(SeqlangError) as info:
        seqlang.load(bad)
    assert "low < high" in info.value.diagnostics[0].message


@pytest.mark.slow
def test_optimiser_recovers_the_published_two_pulse_cz(tmp_path):
    """With a 1 THz blockade and no noise the optimum is the published gate (Levine et al.,
    PRL 123, 170503 (2019): Δ/Ω = 0.377371, τΩ = 4.29268, ξ = 3.90242), to 1e-3."""
    path = write_program(tmp_path, CZ.format(ratio=0.37, area=4.25, jump=3.85), FINE_RIG)
    best = optimise(path, interactions_hz={("a", "b"): 1e12})
    for name, value in PUBLISHED.items():
        assert best.values[name] == pytest.approx(value, abs=1e-3), name
    assert best.fidelity > 1 - 1e-9 and best.start_fidelity < 0.999


@pytest.mark.slow
def test_optimum_at_finite_blockade_beats_the_published_parameters(tmp_path):
    published = CZ.format(**PUBLISHED).replace("start 135 deg", "start 136.4 deg")
    path = write_program(tmp_path, published.replace("(3, 0) um", "(4.5, 0) um"), FINE_RIG)
    best = optimise(path, tolerance=1e-5)
    assert best.fidelity >= best.start_fidelity
    assert best.fidelity > best.start_fidelity + 1e-3  # 4.5 um: V/h ≈ 25 MHz, a few % of the gate is lost
    assert sequence_at(path, best.values).program.free == seqlang.load(path).program.free


# Two independent qubits, each flipped by a microwave pulse of free area: P(|1>) = sin²(A/2)
# (Rabi formula, Foot, Atomic Physics, OUP 2005), so each expect's optimum is A = π.
TWO_FLIPS = """use "bench.rig"
site a = na at (0, 0) um
site c = cs at (40, 0) um
free na_area = 2 rad .. 4 rad start 2.5 rad
free cs_area = 2 rad .. 4 rad start 3.6 rad
sequence flips {
  pulse mw_na area na_area
  pulse mw_cs area cs_area
}
expect a as |1>
expect c as |1>
"""


def test_optimise_a_chosen_expect_or_all_of_them(tmp_path):
    import math
    path = write_program(tmp_path, TWO_FLIPS)
    first = optimise(path, expect=1, tolerance=1e-6)
    assert first.values["na_area"] == pytest.approx(math.pi, abs=1e-3) and "expect a as" in first.objective
    second = optimise(path, expect="c", tolerance=1e-6)
    assert second.values["cs_area"] == pytest.approx(math.pi, abs=1e-3) and "expect c as" in second.objective
    both = optimise(path, tolerance=1e-6)
    assert both.objective == "the mean of all 2 expects"
    assert [both.values[n] for n in ("na_area", "cs_area")] == pytest.approx([math.pi] * 2, abs=1e-3)
    # the mean fidelity at the start: sin²(1.25) and sin²(1.8), averaged
    assert both.start_fidelity == pytest.approx((math.sin(1.25) ** 2 + math.sin(1.8) ** 2) / 2, abs=1e-4)
    with pytest.raises(ValueError, match="no single expect `3`"):
        optimise(path, expect=3)


def test_evolution_gives_the_same_optimum_serially_and_on_a_process_pool(tmp_path):
    """Deterministic trials (one seed for all) and a seeded population: the executor does not matter."""
    path = write_program(tmp_path, TWO_FLIPS)
    options = dict(method="evolution", generations=4, population=4, tolerance=1e-6)
    serial = optimise(path, workers=1, **options)
    pooled = optimise(path, workers=2, **options)
    assert serial == pooled
    assert serial.fidelity > 1 - 1e-9 and serial.method == "evolution"


@pytest.mark.slow
def test_evolution_on_a_dask_cluster_gives_the_same_optimum(tmp_path):
    path = write_program(tmp_path, TWO_FLIPS)
    options = dict(method="evolution", generations=3, population=4, tolerance=1e-6)
    assert optimise(path, **options) == optimise(path, scheduler="local", workers=2, **options)


def test_optimise_command_says_what_it_optimised_and_rejects_bad_options(tmp_path):
    import subprocess
    import sys
    path = write_program(tmp_path, TWO_FLIPS)
    run = lambda *a: subprocess.run([sys.executable, "-m", "seqlang", "optimise", path, "--no-budget", *a],
                                    capture_output=True, text=True, timeout=300)
    done = run("--expect", "2", "--tolerance", "1e-6")
    assert done.returncode == 0, done.stderr
    assert "objective: the fidelity of the expect c as |1> (line 11)" in done.stdout
    assert "simplex" in done.stdout and "in this process" in done.stdout
    for bad, message in ((("--expect", "a,c"), "no single expect `a,c`"), (("--workers", "0"), "--workers must"),
                         (("--population", "0"), "--population must")):
        wrong = run(*bad)
        assert wrong.returncode == 2 and message in wrong.stderr and "Traceback" not in wrong.stderr


def test_a_changed_rig_is_read_again(tmp_path):
    """The per-process cache of parsed files follows the rig too, not only the program."""
    import os
    import shutil
    from seqlang.fit import optimise
    for name in ("cz_optimise.seq", "millpond.rig"):
        shutil.copy(Path(__file__).resolve().parent.parent / "programs" / name, tmp_path / name)
    path = str(tmp_path / "cz_optimise.seq")
    first = optimise._loaded(path)
    assert optimise._loaded(path) is first
    rig = tmp_path / "millpond.rig"
    rig.write_text(rig.read_text(encoding="utf-8") + "\n", encoding="utf-8")
    os.utime(rig, ns=(rig.stat().st_mtime_ns + 10**9,) * 2)
    assert optimise._loaded(path) is not first
