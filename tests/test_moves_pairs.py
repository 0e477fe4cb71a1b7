"""Pair shifts after moves: each Rydberg pulse plays V at the positions of that time.

The simulated final ket is compared with an independent propagation written in
tests/test_physics_tight.py (plain scipy ``expm`` of three levels per atom), here with V
piecewise in time, V = −C6/R⁶ from the alkali Rydberg calculator library (`arc`, Šibalić et al.,
Comput. Phys. Commun. 220, 319 (2017)) called directly in the test, to 1e-8.
"""
from __future__ import annotations

import math
import os

import numpy as np
import pytest
from scipy.linalg import expm

import seqlang
from seqlang.sim.commands import as_document

from conftest import ROOT
from test_physics_tight import RIG as TIGHT_RIG
from test_physics_tight import (JAKSCH_BODY, _arc_c6_hz_m6, _segment, _segments, reference_propagation,
                                simulated_ket3)

# tightbench of test_physics_tight (at its default 300 K) with a caesium deflector (invented numbers).
DEFLECTOR = ("  port aod_cs_x = awg2.1 { kind deflector  steers cs  axis x  scale 0.5 MHz / um  center 75 MHz  "
             "sample_rate 2 MHz }\n")
RIG = (TIGHT_RIG % {"environment": "300 K"}).replace("rig tightbench", "rig movebench") \
    .replace("\n}\n", "\n" + DEFLECTOR + "}\n")
START_UM, END_UM = 15.0, 7.0  # both beyond twice the crossover radius: perturbative C6/R⁶ (atomic-data.md)
MOVE = f"move c to ({END_UM}, 0) um duration 100 us"
# Both atoms in |r⟩ for a while before the move (in superposition with the other inputs), so that
# V at the first distance leaves a relative phase.
BEFORE = """together {
  pulse mw_na area pi/2
  pulse mw_cs area pi/2
}
pulse ryd_cs on c area pi
pulse ryd_na on t area pi
wait 1 us
pulse ryd_na on t area pi
pulse ryd_cs on c area pi
together {
  pulse mw_na area pi/2 phase 180 deg
  pulse mw_cs area pi/2 phase 180 deg
}"""


def _write(tmp_path, body: str) -> str:
    (tmp_path / "m.rig").write_text(RIG)
    path = tmp_path / "m.seq"
    path.write_text(f'use "m.rig"\nsite t = na at (0, 0) um\nsite c = cs at ({START_UM}, 0) um\n'
                    f"sequence m {{\n{body}\n}}\nexpect c, t as psi_plus\n")
    return str(path)


def _piecewise_reference(sequence, sites, changes):
    """|0…0⟩ through the played pulses with V from `changes` [(from_s, {pair: V/h}), ...] per segment."""
    drives, played = sequence.program.rig.drives, sequence.played
    psi = np.zeros(3 ** len(sites), complex)
    psi[0] = 1
    for t0, t1, active in _segments(played.events, played.tick_s):
        v_hz = [v for start, v in changes if start <= t0 + 1e-12][-1]
        h, frame = _segment(drives, sites, active, v_hz)
        psi = np.exp(1j * frame * t1) * (expm(-1j * h * (t1 - t0)) @ (np.exp(-1j * frame * t0) * psi))
    return psi


def _v_hz(distance_um: float) -> float:
    return _arc_c6_hz_m6("Cs133", 62, "Na23", 58) / (distance_um * 1e-6) ** 6


def test_a_gate_after_a_move_uses_v_at_the_new_distance(tmp_path):
    """The Jaksch π–2π–π gate (Jaksch et al., PRL 85, 2208 (2000)) after moving the helper from 15 µm to
    7 µm: V = −C6/(7 µm)⁶ from arc, ket to 1e-8 of the independent propagation; V at the start
    distance would give a different gate."""
    path = _write(tmp_path, JAKSCH_BODY.replace("pulse ryd_cs on c area pi", MOVE + "\npulse ryd_cs on c area pi", 1))
    result = seqlang.simulate(path)
    sites = ("t", "c")
    assert result.interactions_hz[sites] == pytest.approx(_v_hz(END_UM), rel=1e-9, abs=0)
    reference, _ = reference_propagation(seqlang.load(path), sites, {sites: _v_hz(END_UM)})
    assert np.max(np.abs(simulated_ket3(result, sites) - reference)) < 1e-8
    unmoved, _ = reference_propagation(seqlang.load(path), sites, {sites: _v_hz(START_UM)})
    assert np.max(np.abs(reference - unmoved)) > 1e-2


def test_pulses_before_and_after_a_move_get_two_shifts(tmp_path):
    """Rydberg pulses at 15 µm, a move to 7 µm, the gate: the simulator plays −C6/(15 µm)⁶ before the
    move and −C6/(7 µm)⁶ after it (arc), ket to 1e-8 of the piecewise independent propagation, and
    measurably different from either single V; the JSON lists the later shift with its start."""
    path = _write(tmp_path, BEFORE + "\n" + MOVE + "\n" + JAKSCH_BODY)
    sequence = seqlang.load(path)
    result = seqlang.simulate(path)
    sites = ("t", "c")
    rydberg = [e for e in sequence.played.events if e.kind == "pulse" and e.drive.startswith("ryd")]
    switch_at = rydberg[4].start_s  # first Rydberg pulse after the move
    near, far = {sites: _v_hz(END_UM)}, {sites: _v_hz(START_UM)}
    reference = _piecewise_reference(sequence, sites, [(0.0, far), (switch_at, near)])
    simulated = simulated_ket3(result, sites)
    assert np.max(np.abs(simulated - reference)) < 1e-8
    for single in (near, far):
        assert np.max(np.abs(simulated - _piecewise_reference(sequence, sites, [(0.0, single)]))) > 1e-3
    entry = as_document(result)["interactions"]["t-c"]
    assert entry["distance_um"] == pytest.approx(START_UM) and entry["shift_hz"] == pytest.approx(far[sites], rel=1e-9)
    (later,) = entry["later"]
    assert later["distance_um"] == pytest.approx(END_UM) and later["shift_hz"] == pytest.approx(near[sites], rel=1e-9)
    assert later["from_s"] == pytest.approx(switch_at, abs=1e-12)
    assert not [w for w in sequence.warnings if "different distances" in w.message]


def test_the_move_demo_plays_the_pair_model_at_the_new_distance():
    """programs/move_then_gate.seq: the helper moved from 15 µm to 4 µm, inside twice the crossover
    radius, so the pair is diagonalised (atomic-data.md); the simulator's ket matches the independent
    propagation with that V to 1e-8, and V at 15 µm (arc's C6) would not."""
    path = os.path.join(ROOT, "programs", "move_then_gate.seq")
    result = seqlang.simulate(path)
    sites = ("d", "h")
    model = result.pair_models[sites]
    assert model.distance_m == pytest.approx(4e-6) and result.interactions_hz[sites] == model.shift_hz
    reference, _ = reference_propagation(seqlang.load(path), sites, {sites: model.shift_hz})
    assert np.max(np.abs(simulated_ket3(result, sites) - reference)) < 1e-8
    far = _arc_c6_hz_m6("Na23", 58, "Cs133", 62) / 15e-6 ** 6
    unmoved, _ = reference_propagation(seqlang.load(path), sites, {sites: far})
    assert np.max(np.abs(reference - unmoved)) > 1e-2
    assert math.isfinite(model.shift_hz) and abs(model.shift_hz) > 100 * abs(far)
