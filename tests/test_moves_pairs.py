"""Pair shifts follow the geometry: V at the positions and field of each time, also between pulses.

The simulated final ket is compared with an independent propagation written in
tests/test_physics_tight.py (plain scipy ``expm`` of three levels per atom), here with V
piecewise in time, V = −C6/R⁶ from the alkali Rydberg calculator library (`arc`, Šibalić et al.,
Comput. Phys. Commun. 220, 319 (2017)) called directly in the test, to 1e-8. Positions during a
move come from the minimum-jerk closed form (Flash & Hogan, J. Neurosci. 5, 1688 (1985)) written
here; the simulator holds V over 8 steps of a move at each step's 3-point Gauss–Legendre mean
(docs/simulation.md), whose phase ∫V dt is checked against scipy's adaptive quadrature.
"""
from __future__ import annotations

import math
import os

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.linalg import expm

import seqlang
from seqlang.atoms import pairs, stark
from seqlang.compile.geometry import pair_shift_track
from seqlang.sim.commands import as_document
from seqlang.sim.model import DIM

from conftest import ROOT
from test_physics_tight import RIG as TIGHT_RIG
from test_physics_tight import (JAKSCH_BODY, _arc_c6_hz_m6, _one_atom, _segment, _segments,
                                reference_propagation, simulated_ket3)

# tightbench of test_physics_tight (at its default 300 K) with a caesium deflector and an electrode
# (invented numbers).
DEFLECTOR = ("  port aod_cs_x = awg2.1 { kind deflector  steers cs  axis x  scale 0.5 MHz / um  center 75 MHz  "
             "sample_rate 2 MHz }\n"
             "  port plate = dac.2 { kind analog  range -5 V .. 5 V  field_per_volt 20 / m }\n")
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


def _piecewise_reference(sequence, sites, changes, stark_hz=()):
    """|0…0⟩ through the played pulses with V from `changes` [(from_s, {pair: V/h}), ...] (the
    pieces between pulse edges cut at each from_s too), and Stark shifts `stark_hz`
    [(from_s, to_s, {site: shift/h}), ...] of |r⟩ added to H."""
    drives, played = sequence.program.rig.drives, sequence.played
    psi = np.zeros(3 ** len(sites), complex)
    psi[0] = 1
    cuts = sorted({t for t, _ in changes} | {t for a, b, _ in stark_hz for t in (a, b)})
    for s0, s1, active in _segments(played.events, played.tick_s):
        inner = [s0] + [t for t in cuts if s0 + 1e-12 < t < s1 - 1e-12] + [s1]
        for t0, t1 in zip(inner, inner[1:]):
            v_hz = [v for start, v in changes if start <= t0 + 1e-12][-1]
            h, frame = _segment(drives, sites, active, v_hz)
            for a, b, shifts in stark_hz:
                if a - 1e-12 <= t0 < b - 1e-12:
                    h += sum(2 * math.pi * hz * _one_atom(len(sites), sites.index(site), 2, 2)
                             for site, hz in shifts.items())
            psi = np.exp(1j * frame * t1) * (expm(-1j * h * (t1 - t0)) @ (np.exp(-1j * frame * t0) * psi))
    return psi


def _v_hz(distance_um: float) -> float:
    return _arc_c6_hz_m6("Cs133", 62, "Na23", 58) / (distance_um * 1e-6) ** 6


def _distance_um(move, t: float) -> float:
    """c's distance from t during `move` (START_UM → END_UM), by the minimum-jerk closed form."""
    tau = min(1.0, max(0.0, (t - move.start_s) / move.duration_s))
    return START_UM + (END_UM - START_UM) * tau**3 * (10 - 15 * tau + 6 * tau**2)


GAUSS_3 = ((0.5 - math.sqrt(15) / 10, 5 / 18), (0.5, 8 / 18), (0.5 + math.sqrt(15) / 10, 5 / 18))


def _move_changes(move, tick: float, sites) -> list:
    """[(from_s, {pair: V/h}), ...] through `move`: 8 equal steps on the tick, each at the 3-point
    Gauss–Legendre mean of V(R(t)) over the step, then V at END_UM from the move's end."""
    edges = [move.start_s + round(k * move.duration_s / 8 / tick) * tick for k in range(8)] + [move.end_s]
    steps = [(t0, {sites: sum(w * _v_hz(_distance_um(move, t0 + x * (t1 - t0))) for x, w in GAUSS_3)})
             for t0, t1 in zip(edges, edges[1:])]
    return steps + [(move.end_s, {sites: _v_hz(END_UM)})]


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


def test_pulses_before_and_after_a_move_get_a_shift_per_step_and_one_after(tmp_path):
    """Rydberg pulses at 15 µm, a move to 7 µm, the gate: the simulator plays −C6/(15 µm)⁶ before the
    move, its steps through it and −C6/(7 µm)⁶ from its end (arc), ket to 1e-8 of the piecewise
    independent propagation, and measurably different from either single V; the JSON lists the
    later shifts with their starts."""
    path = _write(tmp_path, BEFORE + "\n" + MOVE + "\n" + JAKSCH_BODY)
    sequence = seqlang.load(path)
    result = seqlang.simulate(path)
    sites = ("t", "c")
    (move,) = [e for e in sequence.played.events if e.kind == "move"]
    near, far = {sites: _v_hz(END_UM)}, {sites: _v_hz(START_UM)}
    changes = [(0.0, far)] + _move_changes(move, sequence.played.tick_s, sites)
    simulated = simulated_ket3(result, sites)
    assert np.max(np.abs(simulated - _piecewise_reference(sequence, sites, changes))) < 1e-8
    for single in (near, far):
        assert np.max(np.abs(simulated - _piecewise_reference(sequence, sites, [(0.0, single)]))) > 1e-3
    entry = as_document(result)["interactions"]["t-c"]
    assert entry["distance_um"] == pytest.approx(START_UM) and entry["shift_hz"] == pytest.approx(far[sites], rel=1e-9)
    later = entry["later"]
    assert [e["from_s"] for e in later] == pytest.approx([t for t, _ in changes[1:]], abs=1e-12)
    assert [e["shift_hz"] for e in later] == pytest.approx([v[sites] for _, v in changes[1:]], rel=1e-9)
    assert later[-1]["distance_um"] == pytest.approx(END_UM)
    assert not [w for w in sequence.warnings if "different distances" in w.message]


# Both atoms excited far apart (V/Ω ≈ 0.04: nearly independent π pulses), c brought close while both
# sit in |r⟩, a wait, de-excitation. ∫V dt through the move is ≈ 60 rad, through the wait ≈ 45 rad.
LEFT_IN_RYDBERG = """together {
  pulse mw_na area pi/2
  pulse mw_cs area pi/2
}
pulse ryd_cs on c area pi
pulse ryd_na on t area pi
move c to (%s, 0) um duration 10 us
wait 2 us
pulse ryd_na on t area pi
pulse ryd_cs on c area pi""" % END_UM


def test_a_pair_left_in_rydberg_through_a_move_and_a_wait_follows_the_distance(tmp_path):
    """V switches through the move and at its end, not at the next pulse: ket to 1e-8 of the
    independent propagation with that V; with V switched at the next pulse (the atoms' geometry
    sampled at pulses only) the ket is far off."""
    path = _write(tmp_path, LEFT_IN_RYDBERG)
    sequence = seqlang.load(path)
    simulated = simulated_ket3(seqlang.simulate(path), sites := ("t", "c"))
    (move,) = [e for e in sequence.played.events if e.kind == "move"]
    far = {sites: _v_hz(START_UM)}
    reference = _piecewise_reference(sequence, sites, [(0.0, far)] + _move_changes(move, sequence.played.tick_s, sites))
    assert np.max(np.abs(simulated - reference)) < 1e-8
    after = min(e.start_s for e in sequence.played.events if e.kind == "pulse" and e.start_s > move.start_s)
    at_next_pulse = _piecewise_reference(sequence, sites, [(0.0, far), (after, {sites: _v_hz(END_UM)})])
    assert np.max(np.abs(simulated - at_next_pulse)) > 1e-2


def test_a_pair_brought_inside_the_crossover_radius_between_pulses_warns_at_the_move(tmp_path):
    """Both atoms in |r⟩, c brought to 4 µm and back before the de-excitation: no pulse sees the
    near geometry, the check of the move's end does (inside twice the crossover radius, 3.47 µm
    for this pair from arc's channel (atoms.pairs); the warning points at the move)."""
    there_and_back = LEFT_IN_RYDBERG.replace(f"({END_UM}, 0) um", "(4, 0) um").replace(
        "wait 2 us", f"wait 2 us\nmove c to ({START_UM}, 0) um duration 10 us")
    path = _write(tmp_path, there_and_back)
    move_line = 5 + there_and_back.splitlines().index("move c to (4, 0) um duration 10 us")  # after 4 header lines
    warnings = [w for w in seqlang.load(path).warnings if "crossover radius" in w.message]
    assert [(w.span.line, w.message.split(" is inside")[0]) for w in warnings] == [(move_line, "`t`-`c` at 4 um")]


def test_the_track_steps_through_the_move_and_its_phase_is_the_integral(tmp_path):
    """The track of LEFT_IN_RYDBERG: an entry at the first Rydberg pulse, at the 8 steps of the move
    (on the tick) and at its end (7 µm); Σ V·Δt over the steps is ∫V(R(t)) dt to 1e-6 (scipy's
    adaptive quadrature of arc's C6/R⁶ on the closed-form path). A move before the first Rydberg
    pulse (the move demo) adds no entry."""
    sequence = seqlang.load(_write(tmp_path, LEFT_IN_RYDBERG))
    played = sequence.played
    ((pair, track),) = pair_shift_track(sequence.program, played).items()
    (move,) = [e for e in played.events if e.kind == "move"]
    first = min(e.start_s for e in played.events if e.kind == "pulse" and e.drive.startswith("ryd"))
    steps = [move.start_s + k * move.duration_s / 8 for k in range(8)]
    assert pair == ("t", "c") and [t for t, _, _ in track] == pytest.approx([first, *steps, move.end_s], abs=1e-12)
    assert all(abs(t / played.tick_s - round(t / played.tick_s)) < 1e-6 for t, _, _ in track)
    assert track[-1][1].distance_m == pytest.approx(END_UM * 1e-6) and track[-1][2] == pytest.approx((7e-6, 0, 0))
    durations = np.diff([t for t, _, _ in track[1:]])
    phase = sum(d * shift.shift_hz for d, (_, shift, _) in zip(durations, track[1:]))
    exact, _ = quad(lambda t: _v_hz(_distance_um(move, t)), move.start_s, move.end_s, epsabs=0, epsrel=1e-12)
    assert phase == pytest.approx(exact, rel=1e-6)
    demo = seqlang.load(os.path.join(ROOT, "programs", "move_then_gate.seq"))
    assert [len(t) for t in pair_shift_track(demo.program, demo.played).values()] == [1]


def test_show_lists_each_change_of_the_pair_model_with_its_start(tmp_path):
    """`show`'s pair models for LEFT_IN_RYDBERG: the first model, then one indented row per later
    track entry (8 steps, the move's end); the last at 7 µm with arc's −C6/(7 µm)⁶."""
    from seqlang.lang import units
    from seqlang.show import pair_models_table, quantity
    sequence = seqlang.load(_write(tmp_path, LEFT_IN_RYDBERG))
    (move,) = [e for e in sequence.played.events if e.kind == "move"]
    rows = pair_models_table(sequence.program, sequence.played).splitlines()
    assert rows[0].startswith("t-c: R = 15 µm") and len([r for r in rows if r.startswith("  from ")]) == 9
    assert rows[9].startswith(f"  from {quantity(move.end_s, units.DURATION)}: R = 7 µm")
    assert f"V/h = {quantity(_v_hz(END_UM), units.FREQUENCY)}" in rows[9]


FIELD_V_M = 10.0  # moves the Na 58S + Cs 62S channel defect from 159 to 116 MHz: V/h up by 12 %


def test_a_field_stretch_between_pulses_changes_v_from_its_start(tmp_path):
    """Both atoms in |r⟩ at 15 µm, a 20 µs field stretch with no pulse in it, de-excitation: V(E) and
    the Stark shifts apply from the field's start to its end (ket to 1e-8 of the independent
    propagation; V(E) and the shifts from seqlang.atoms, checked against arc in
    tests/test_atoms_pairs.py), and V(0) all along (switching at pulses only) is far off."""
    body = LEFT_IN_RYDBERG.replace(f"move c to ({END_UM}, 0) um duration 10 us\nwait 2 us",
                                   f"wait 1 us\nfield plate {FIELD_V_M} V / m {{\n  wait 20 us\n}}\nwait 1 us")
    sequence = seqlang.load(_write(tmp_path, body))
    simulated = simulated_ket3(seqlang.simulate(sequence), sites := ("t", "c"))
    (field,) = [e for e in sequence.played.events if e.kind == "field"]
    levels = {"t": ("Na23", "58S1/2"), "c": ("Cs133", "62S1/2")}
    v_field = pairs.pair_shift(*levels["t"], *levels["c"], START_UM * 1e-6, 0.0, FIELD_V_M).shift_hz
    shifts = [(field.start_s, field.end_s, {s: stark.stark_shift_hz(*levels[s], FIELD_V_M) for s in sites})]
    far = {sites: _v_hz(START_UM)}
    changes = [(0.0, far), (field.start_s, {sites: v_field}), (field.end_s, far)]
    assert np.max(np.abs(simulated - _piecewise_reference(sequence, sites, changes, shifts))) < 1e-8
    assert np.max(np.abs(simulated - _piecewise_reference(sequence, sites, [(0.0, far)], shifts))) > 1e-2
    ((_, track),) = pair_shift_track(sequence.program, sequence.played).items()
    assert [t for t, _, _ in track[1:]] == pytest.approx([field.start_s, field.end_s], abs=1e-12)
    assert [s.field_v_m for _, s, _ in track] == [0.0, FIELD_V_M, 0.0]


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


@pytest.mark.parametrize("engine", ["fast", "lindblad", "qutip"])
def test_every_engine_plays_v_through_the_move(tmp_path, engine):
    """The fast, the density-matrix and the QuTiP propagation all read the per-segment V: final
    density matrix to 1e-8 of the independent propagation's |ψ⟩⟨ψ| (LEFT_IN_RYDBERG)."""
    if engine == "qutip":
        pytest.importorskip("qutip")
    path = _write(tmp_path, LEFT_IN_RYDBERG)
    sequence, sites = seqlang.load(path), ("t", "c")
    (move,) = [e for e in sequence.played.events if e.kind == "move"]
    changes = [(0.0, {sites: _v_hz(START_UM)})] + _move_changes(move, sequence.played.tick_s, sites)
    reference = _piecewise_reference(sequence, sites, changes)
    result = seqlang.simulate(path, engine=engine)
    (cluster,) = result.clusters
    assert result.engine == engine
    digits = [int(np.base_repr(j, 3).zfill(2), DIM) for j in range(9)]
    density = cluster.density()[np.ix_(digits, digits)]
    assert np.max(np.abs(density - np.outer(reference, reference.conj()))) < 1e-8
