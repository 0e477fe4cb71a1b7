"""A detuned pulse keeps its rotation after tick rounding (issue 17).

The played pulse (after compile) and the written pulse are propagated with the
closed-form two-level propagator written here, independently of seqlang's
simulator: H/ħ = (Ω/2)(e^{iφ}|1⟩⟨0| + h.c.) − Δ|1⟩⟨1| with Ω = 2π·rabi and
Δ = 2π·detuning (the convention of docs/simulation.md). With
W = √(Ω² + Δ²) and M = H + (Δ/2)·1, M² = (W/2)²·1, so
U(t) = e^{iΔt/2} [cos(Wt/2)·1 − i sin(Wt/2)·M/(W/2)]  (textbook, Rabi formula).
"""
from __future__ import annotations

import json
import math

import numpy as np
import pytest

from conftest import write_program
from seqlang.compile.pipeline import check
from seqlang.emit.tables import timing_json

# A rig whose amplitude DAC is fine enough (32 bits: steps of 2.3e-10 of full
# scale) that amplitude rounding stays below the 1e-9 bound; tick 2 ns.
RIG = """\
rig fine {
  tick 2 ns
  species cs = Cs133 { }
  drive mw microwave cs { rabi 20 kHz  detuning -50 kHz .. 50 kHz  port awg0.1  amplitude_bits 32 }
}
"""


def propagator(rabi_hz: float, detuning_hz: float, phase: float, t: float) -> np.ndarray:
    omega, delta = 2 * math.pi * rabi_hz, 2 * math.pi * detuning_hz
    w = math.hypot(omega, delta)
    m = np.array([[delta / 2, omega / 2 * np.exp(-1j * phase)],
                  [omega / 2 * np.exp(1j * phase), -delta / 2]])
    return np.exp(1j * delta * t / 2) * (math.cos(w * t / 2) * np.eye(2) - 1j * math.sin(w * t / 2) * m / (w / 2))


def compiled(tmp_path, pulse: str):
    path = write_program(tmp_path, f'use "bench.rig"\nsite c = cs at (0, 0) um\nsequence s {{\n  {pulse}\n}}\n',
                         RIG)
    return check(path)


CASES = [
    # 10001 ns = 5000.5 ticks: rounded to a whole tick, Ω and Δ scaled by 10001/10000.
    ("pulse mw duration 10001 ns rabi 15 kHz detuning 7 kHz phase 0.3 rad", 15e3, 7e3, 10001e-9),
    # At the drive maximum the pulse is stretched by a tick instead (5000.5 -> 5001 ticks).
    ("pulse mw duration 10001 ns rabi 20 kHz detuning -11 kHz", 20e3, -11e3, 10001e-9),
    # An area-defined pulse: 3π/4 at 13 kHz lasts 28.846... us.
    ("pulse mw area 3pi/4 rabi 13 kHz detuning 4 kHz", 13e3, 4e3, 0.375 / 13e3),
]


@pytest.mark.parametrize("pulse, rabi, detuning, duration", CASES)
def test_played_detuned_pulse_gives_the_written_unitary(tmp_path, pulse, rabi, detuning, duration):
    checked = compiled(tmp_path, pulse)
    played = checked.quantized.events[0]
    assert played.duration_s != pytest.approx(duration, abs=1e-15), "the case must need rounding"
    phase = played.phase_rad
    ideal = propagator(rabi, detuning, phase, duration)
    actual = propagator(played.rabi_hz, played.detuning_hz, phase, played.duration_s)
    assert np.abs(actual - ideal).max() < 1e-9
    # Keeping only the area (Δ as written) misses by far more: the check can fail.
    area_only = propagator(played.rabi_hz, detuning, phase, played.duration_s)
    assert np.abs(area_only - ideal).max() > 1e-6


def test_detuning_change_is_reported_beside_the_area_error(tmp_path):
    checked = compiled(tmp_path, CASES[0][0])
    played = checked.quantized.events[0]
    report = checked.plan.report
    assert report.detuning_changes_hz == ((0, played.detuning_hz - 7e3),)
    assert report.max_detuning_change_hz == pytest.approx(7e3 * (10001 / 10000 - 1), rel=1e-6)
    document = json.loads(timing_json(checked))
    assert document["report"]["detuning_change_hz"]["0"] == pytest.approx(7e3 * 1e-4, rel=1e-6)
    assert document["report"]["max_detuning_change_hz"] == pytest.approx(0.7, rel=1e-6)


def test_scaled_detuning_outside_the_drive_range_is_an_error(tmp_path):
    from seqlang.lang.diagnostics import SeqlangError
    with pytest.raises(SeqlangError) as caught:
        compiled(tmp_path, "pulse mw duration 10001 ns rabi 15 kHz detuning 50 kHz")
    message = caught.value.diagnostics[0].message
    assert message.startswith("after tick rounding the detuning 50 kHz scales to 50.005 kHz, outside the range")
