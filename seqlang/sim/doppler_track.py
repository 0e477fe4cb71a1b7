"""Doppler phase of a moving atom with the traps switched on and off.

The Rydberg coherence of an atom at x(t) picks up the phase k_eff·x(t) (along the
legs' effective wave vector). With the traps on the atom oscillates harmonically,

    x(t) = x₀ cos ωt + (v₀/ω) sin ωt,   v(t) = −x₀ω sin ωt + v₀ cos ωt,

so the phase stays bounded (of order k_eff·σ_x); with the traps off it flies freely,
x(t) = x₀ + v₀t, and the phase grows without bound. For a thermal atom
(σ_v = √(k_B T/m), σ_x = σ_v/ω) the coherence ⟨e^{ik(x(t)−x(0))}⟩ is

    traps on:  exp(−k²σ_x²(1 − cos ωt))   (bounded; full revival at t = 2π/ω)
    traps off: exp(−k²σ_v²t²/2) = exp(−(t/T2*)²),  T2* = √2/(k σ_v)

(derived; the free-flight form is the one of de Léséleuc et al., PRA 97, 053803 (2018)).

This module is the isolated physics: a per-shot track through segments marked
trapped or free, and the mean Doppler detuning of each segment, k·Δx/Δt, whose
integral over the segment is the exact phase. The noise sampler plays `segment_offsets`
when the rig declares a trap switch (`noise._doppler_tracks`).
"""
from __future__ import annotations

import numpy as np


def track(x0: np.ndarray, v0: np.ndarray, omega_rad_s: float,
          segments: list[tuple[float, bool]]) -> tuple[np.ndarray, np.ndarray]:
    """Positions and velocities at every segment boundary, shape (len(segments) + 1, *x0.shape).

    `segments` is a list of (duration_s, trapped); `omega_rad_s` the trap's angular frequency
    along k_eff. Each piece is the closed-form harmonic or ballistic motion.
    """
    x, v = np.asarray(x0, float), np.asarray(v0, float)
    xs, vs = [x], [v]
    for duration, trapped in segments:
        x, v = _harmonic(x, v, omega_rad_s, duration) if trapped else (x + v * duration, v)
        xs.append(x)
        vs.append(v)
    return np.array(xs), np.array(vs)


def _harmonic(x, v, omega: float, t: float):
    c, s = np.cos(omega * t), np.sin(omega * t)
    return x * c + v / omega * s, -x * omega * s + v * c


def segment_detunings(k_eff: float, positions: np.ndarray, durations: list[float]) -> np.ndarray:
    """Mean Doppler detuning (rad/s) of each segment: k·(x_end − x_start)/duration.

    Played as a constant detuning over the segment it gives the exact phase at the
    segment's end; inside a pulse shorter than a trap period the difference is small.
    """
    steps = np.diff(positions, axis=0)
    times = np.asarray(durations, float).reshape((-1,) + (1,) * (positions.ndim - 1))
    return np.divide(k_eff * steps, times, out=np.zeros_like(steps), where=times > 0)


def at_times(x0: np.ndarray, v0: np.ndarray, omega_rad_s: float, switches: list[tuple[float, bool]],
             times: list[float]) -> tuple[np.ndarray, np.ndarray]:
    """Position and velocity at each of `times` (sorted, s), shape (len(times), *x0.shape).

    `switches` are (time_s, traps_on) in time order; the traps are on from t = 0 until the first.
    """
    events = sorted([(t, 0, on) for t, on in switches] + [(t, 1, k) for k, t in enumerate(times)])
    x, v, now, on = np.asarray(x0, float), np.asarray(v0, float), 0.0, True
    xs, vs = [None] * len(times), [None] * len(times)
    for t, is_time, what in events:
        (x,), (v,) = (a[1:] for a in track(x, v, omega_rad_s, [(t - now, on)]))
        now = t
        if is_time:
            xs[what], vs[what] = x, v
        else:
            on = what
    return np.array(xs), np.array(vs)


def segment_offsets(k_eff: float, x0, v0, omega_rad_s: float, switches, segments: list[tuple[float, float]]):
    """Per segment (start_s, duration_s): the Doppler detuning k·v(t_m) and the extra coupling phase
    k·(x(t_m) − x₀) − k·v(t_m)·t_m at its midpoint t_m, shapes (segments, *x0.shape).

    In the drive frame referenced to t = 0 (docs/simulation.md), a coupling with these offsets sees
    the laser phase k·(x(t) − x₀) to first order about t_m. With the traps off all along this is the
    free-flight model: detuning k·v₀, extra phase 0.
    """
    mids = [start + duration / 2 for start, duration in segments]
    x, v = at_times(x0, v0, omega_rad_s, switches, mids)
    t = np.asarray(mids, float).reshape((-1,) + (1,) * (x.ndim - 1))
    return k_eff * v, k_eff * (x - np.asarray(x0, float)) - k_eff * v * t
