"""Moves (minimum-jerk deflector ramps), field stretches (electrode tables, Stark shifts in the
simulator) and the geometry checks of `check`.

Closed forms: the minimum-jerk path x(τ) = D(10τ³ − 15τ⁴ + 6τ⁵) (Flash & Hogan, J. Neurosci. 5,
1688 (1985)) with peak velocity 15D/8T and peak acceleration 10D/(√3T²) (derived); the Rabi
formula (textbook) for a detuned pulse. Tests that need Na–Cs pair data are marked slow.
"""
import json
import math
import os
import subprocess
import sys

import numpy as np
import pytest

import seqlang
from seqlang.atoms import cache, stark
from seqlang.compile import motion
from seqlang.sim.commands import as_document

from conftest import ROOT, write_program

RIG = """\
rig dock {
  tick 4 ns
  species rb = Rb87 { qubit clock  rydberg 60S1/2 }
  drive mw_rb microwave rb { rabi 20 kHz  port awg0.1 }
  drive ryd_rb rydberg rb { rabi 1 MHz  reach each  port awg1.1  detuning -20 MHz .. 20 MHz }
  port aod_x = awg2.1 { kind deflector  axis x  scale 0.4 MHz / um  center 80 MHz  sample_rate 1 MHz
                        max_velocity 0.2 um / us  max_acceleration 0.001 um / us ^ 2  latency 1 us }
  port plate = dac.2 { kind analog  range -5 V .. 5 V  field_per_volt 20 / m  latency 10 us }
}
"""


@pytest.fixture(scope="module", autouse=True)
def shared_cache_dir(tmp_path_factory):
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv(cache.CACHE_DIR_ENV, str(tmp_path_factory.mktemp("seqlang-moves-cache")))
        yield


def program(tmp_path, body: str, sites: str = "site a = rb at (0, 0) um\nsite b = rb at (30, 0) um\n") -> str:
    return write_program(tmp_path, f'use "bench.rig"\n{sites}sequence s {{\n{body}\n}}\n', RIG)


def test_minimum_jerk_ramp_after_tick_and_sample_quantisation(tmp_path):
    """The compiled ramp of b moving 30 → 10 µm in 400 µs: endpoints exact; velocity and acceleration
    of the sampled frequencies against the closed form; every sample on the 4 ns tick."""
    sequence = seqlang.load(program(tmp_path, "  move b to (10, 0) um duration 400 us"))
    (ramp,) = [e for e in sequence.compile().rows() if e.kind == "ramp"]
    assert ramp.port == "awg2.1" and ramp.targets == ("b",)
    assert ramp.ramp[:2] == pytest.approx((80e6 + 0.4e12 * 30e-6, 80e6 + 0.4e12 * 10e-6))
    t, f = (np.array(x) for x in motion.ramp_samples(*ramp.ramp[:2], 400e-6, 1e6, 4e-9))
    assert f[0] == ramp.ramp[0] and f[-1] == ramp.ramp[1] and t[-1] == pytest.approx(400e-6)
    assert np.allclose(t / 4e-9, np.round(t / 4e-9))
    distance_hz, duration = ramp.ramp[1] - ramp.ramp[0], 400e-6
    velocity = np.diff(f) / np.diff(t)
    acceleration = np.diff(velocity) / np.diff(t)[1:]
    assert abs(velocity).max() == pytest.approx(15 / 8 * abs(distance_hz) / duration, rel=1e-3)
    assert abs(acceleration).max() == pytest.approx(10 / math.sqrt(3) * abs(distance_hz) / duration**2, rel=1e-2)
    assert ramp.tick >= 0 and ramp.tick == round(sequence.played.events[0].start_s / 4e-9) - 250  # 1 us early


def test_positions_follow_the_profile(tmp_path):
    sequence = seqlang.load(program(tmp_path, "  wait 1 us\n  move b by (-20, 0) um duration 400 us"))
    played = sequence.played
    start = played.events[0].start_s
    assert motion.positions_at(sequence.program, played, start)["b"][0] == pytest.approx(30e-6)
    assert motion.positions_at(sequence.program, played, start + 200e-6)["b"][0] == pytest.approx(20e-6)
    assert motion.positions_at(sequence.program, played, start + 1)["b"][0] == pytest.approx(10e-6)
    assert motion.minimum_jerk(0.25) == pytest.approx(10 / 64 - 15 / 256 + 6 / 1024)


def test_field_stretch_sets_the_electrode_and_clears_it(tmp_path):
    sequence = seqlang.load(program(tmp_path, "  field plate 50 V / m {\n    pulse mw_rb area pi\n  }"))
    sets = [e for e in sequence.compile().rows() if e.port == "dac.2"]
    assert [e.value for e in sets] == pytest.approx([2.5, 0.0])  # 50 V/m at 20 V/m per V
    pulse = sequence.played.pulses()[0]
    assert sets[1].tick - sets[0].tick == round(pulse.duration_s / 4e-9)


def test_rydberg_pulse_during_a_move_warns(tmp_path):
    body = "  together {\n    move b by (5, 0) um duration 400 us\n    pulse ryd_rb on a area pi\n  }"
    sequence = seqlang.load(program(tmp_path, body, "site a = rb at (0, 0) um\nsite b = rb at (60, 0) um\n"))
    assert any("Rydberg pulse while b is moving" in w.message for w in sequence.warnings)


def test_check_without_rydberg_pairs_does_not_import_the_atomic_library(tmp_path):
    path = program(tmp_path, "  move b to (10, 0) um duration 400 us\n  pulse mw_rb area pi")
    code = f"import sys, seqlang; seqlang.load({path!r}); print('arc' in sys.modules)"
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env={**os.environ, "PYTHONPATH": ROOT})
    assert run.stdout.strip() == "False", run.stderr


def test_stark_shift_moves_the_rydberg_resonance_in_the_simulator(tmp_path):
    """A π pulse in 40 V/m: on resonance when its detuning equals the Stark shift −αE²/2 of
    Rb 60S (P_r = 1), and by the Rabi formula with Δ = the shift when it does not compensate."""
    shift = stark.stark_shift_hz("Rb87", "60S1/2", 40.0)
    assert shift < -1e5
    def rydberg_population(detuning_hz):
        body = f"  pulse mw_rb area pi\n  field plate 40 V / m {{\n    pulse ryd_rb on a area pi detuning {detuning_hz} Hz\n  }}"
        result = seqlang.simulate(program(tmp_path, body, "site a = rb at (0, 0) um\n"), interactions_hz={})
        return as_document(result)["site_populations"]["a"]["r"]
    assert rydberg_population(shift) == pytest.approx(1.0, abs=1e-6)
    omega = 1e6
    rabi_formula = omega**2 / (omega**2 + shift**2) * math.sin(math.pi / 2 * math.sqrt(1 + (shift / omega) ** 2)) ** 2
    assert rydberg_population(0.0) == pytest.approx(rabi_formula, abs=2e-3)


# ------------------------------------------------------------ the demo lab (Na–Cs pair data)
DEMO = os.path.join(ROOT, "programs")


def test_demo_rig_pair_gets_a_warning_from_check():
    """The demo Na 58S + Cs 62S pair at 4 µm lies inside twice its crossover radius: `check`
    says so (the perturbative C6 gives −102 MHz, the diagonalised potential −63 MHz)."""
    warnings = seqlang.load(os.path.join(DEMO, "bell_pair.seq")).warnings
    assert any("crossover radius" in w.message and "diagonalised" in w.message for w in warnings)


def test_forster_demo_warns_and_reports_the_model_per_pair():
    sequence = seqlang.load(os.path.join(DEMO, "forster_gate.seq"))
    assert any("Förster resonance at 10.2 V/m" in w.message for w in sequence.warnings)
    document = as_document(seqlang.simulate(sequence))
    pair = document["interactions"]["d-h"]
    assert pair["model"] == "diagonalised" and pair["field_v_m"] == 10.2
    assert abs(pair["channel_defect_hz"]) < 1e6 and 0 < pair["overlap"] < 1
    assert document["expectations"][0]["fidelity"] > 0.99


def test_interactions_after_a_move_use_the_new_distance():
    document = as_document(seqlang.simulate(os.path.join(DEMO, "move_then_gate.seq")))
    assert document["interactions"]["d-h"]["distance_um"] == pytest.approx(4.0)
    assert document["expectations"][0]["fidelity"] > 0.99


@pytest.mark.parametrize("distance", [8, 12])
def test_partial_blockade_warns_with_ratio_and_radius(tmp_path, distance):
    import shutil
    shutil.copy(f"{DEMO}/millpond.rig", tmp_path / "millpond.rig")  # includes stay in the program's folder
    seq = ('use "millpond.rig"\nsite d = na at (0, 0) um\n'
           f"site h = cs at ({distance}, 0) um\n"
           "sequence s {\n  pulse ryd_cs on h area pi\n  pulse ryd_na area 2pi\n  pulse ryd_cs on h area pi\n}\n")
    path = tmp_path / "pair.seq"
    path.write_text(seq)
    warnings = [w.message for w in seqlang.load(str(path)).warnings]
    assert any("blockade is partial" in w and "times the Rabi frequency" in w and "blockade radius" in w
               for w in warnings), warnings


def test_show_lists_the_pair_model_and_the_defects_at_the_field():
    run = subprocess.run([sys.executable, "-m", "seqlang", "show", os.path.join(DEMO, "forster_gate.seq")],
                         capture_output=True, text=True, env={**os.environ, "PYTHONPATH": ROOT})
    assert run.returncode == 0, run.stderr
    assert "E = 10.2 V/m: diagonalised" in run.stdout
    assert "na-cs channel defects: 55P3/2+59P3/2" in run.stdout
    assert "Stark shifts na 57S1/2 -554" in run.stdout


MANY_MOVES = """\
  move a to (5, 0) um duration 200 us
  together {
    move a to (9, 1) um duration 300 us
    repeat 1 {
      wait 100 us
      move b to (20, 0) um duration 50 us
    }
  }
  together {
    move a to (0, 0) um duration 40 us
    move a to (3, 2) um duration 100 us
  }
  wait 7 us
  move b to (30, 0) um duration 80 us"""


def _timeline_with_moves(tmp_path):
    """A written timeline whose site `a` starts at −0 and has two moves under way at once
    (lowered without the checks, which would reject them)."""
    from seqlang.compile.lower import lower
    from seqlang.program.resolve import resolve
    resolved, _ = resolve(program(tmp_path, MANY_MOVES, "site a = rb at (-0, 0) um\nsite b = rb at (30, 0) um\n"))
    return resolved, lower(resolved)


def _position_by_scan(program, timeline, name: str, t: float):
    """One site's position at t by a scan of every move (the form SitePaths replaced)."""
    where = program.sites[name].position_m
    for move in motion.moves(timeline):
        if name in move.targets:
            done = motion.minimum_jerk((t - move.start_s) / move.duration_s) if move.duration_s \
                else float(t >= move.start_s)
            where = tuple(x + done * d for x, d in zip(where, move.displacement_m))
    return where


def _moving_by_scan(timeline, start: float, end: float) -> set[str]:
    """Sites moved at some time within [start, end), by a scan of every move."""
    return {s for m in motion.moves(timeline) if m.start_s < end and start < m.end_s for s in m.targets}


def _probe_times(timeline) -> list[float]:
    edges = [t for m in motion.moves(timeline) for t in (m.start_s, m.end_s, (m.start_s + m.end_s) / 2)]
    near = [math.nextafter(t, d) for t in edges for d in (-math.inf, math.inf)]
    return sorted(set(edges + near + [0.0, -1.0, timeline.duration_s + 1.0]))


def test_site_paths_give_the_positions_of_the_scan_over_every_move_bit_for_bit(tmp_path):
    resolved, timeline = _timeline_with_moves(tmp_path)
    assert math.copysign(1.0, resolved.sites["a"].position_m[0]) < 0  # the −0 case is exercised
    paths = motion.SitePaths(resolved, timeline)
    for t in _probe_times(timeline):
        for site in ("a", "b"):
            expected = _position_by_scan(resolved, timeline, site, t)
            assert [x.hex() for x in paths.position(site, t)] == [x.hex() for x in expected], (site, t)


def test_moving_sites_match_the_scan_over_every_move(tmp_path):
    _, timeline = _timeline_with_moves(tmp_path)
    times = _probe_times(timeline)
    moving = motion.MovingSites(timeline)
    for start, end in zip(times, times[3:] + times[-1:] * 3):  # starts in order, as the walk asks
        assert moving.during(start, end) == _moving_by_scan(timeline, start, end), (start, end)


@pytest.mark.parametrize("first, close", [("together", False), ("repeat 1", True)])
def test_moves_under_way_at_once_are_checked_for_spacing_with_each_other(tmp_path, first, close):
    """a moves to 0.5 µm from where b starts. Played at once, b is on its way out (no error);
    one after the other, b is still there (errors). Then a follows b to 50 µm while a longer
    move of b, begun before a's, takes b on to 80 µm (no error either way)."""
    body = f"""  {first} {{
    move a to (29.5, 0) um duration 500 us
    move b to (50, 0) um duration 500 us
  }}
  together {{
    move b to (80, 0) um duration 800 us
    repeat 1 {{
      wait 300 us
      move a to (50, 0) um duration 500 us
    }}
  }}"""
    errors = []
    try:
        seqlang.load(program(tmp_path, body))
    except seqlang.SeqlangError as failure:
        errors = [d.message for d in failure.diagnostics]
    assert [m for m in errors if "closer than the minimum spacing" not in m] == []
    assert len(errors) == (2 if close else 0), errors  # one after the other: both moves come close


def test_a_move_too_fast_inside_repeat_is_reported_once(tmp_path):
    """Each iteration plays the same move; the same error at the same span is said once."""
    with pytest.raises(seqlang.SeqlangError) as failure:
        seqlang.load(program(tmp_path, "  repeat 4 {\n    move b by (-20, 0) um duration 20 us\n"
                                       "    move b by (20, 0) um duration 20 us\n  }"))
    messages = [(d.message, d.span.line) for d in failure.value.diagnostics]
    velocity = [m for m in messages if m[0].startswith("peak velocity")]
    assert len(velocity) == 2 and {line for _, line in velocity} == {6, 7}
    assert len(messages) == len(set(messages))
