"""Classical noise shared by the whole array: drawn once per shot, seen by every cluster.

Clusters are propagated apart, but some noise is one physical thing for every
atom: the magnetic field (an AC line component with one phase per shot, and a
quasi-static offset of rms ``field_rms``, felt by each species through its
``field_sensitivity``), and each drive's beam (its intensity, detuning error
and servo-bump phase noise reach every atom the drive reaches). These numbers
come from one stream, seeded from the run's seed, and replace the per-cluster
draws of :func:`seqlang.sim.noise.draw`, so that shot k of every cluster sees
the same field and the same beams. Per-atom sources (thermal motion, Doppler,
T2*, preparation, imaging) stay independent.

With ``shared=False`` every cluster draws its own field and beams (the old
behaviour; used to show that feed-forward gains nothing from unshared noise).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .model import Model
from .noise import BUMP_COMPONENTS, Draws, model_drives

SHARED_STREAM = 0x5EED  # second entry of the seed sequence of the shared stream


@dataclass(frozen=True)
class SharedNoise:
    """One shot's shared numbers, stacked over shots."""

    field_phase: np.ndarray  # (shots,) uniform in [0, 2π)
    field_offset: np.ndarray  # (shots,) standard normal, in units of the rig's field_rms
    intensity: dict[str, np.ndarray]  # drive → (shots,)
    detuning: dict[str, np.ndarray]  # drive → (shots,)
    bumps: dict[str, np.ndarray]  # drive → (shots, BUMP_COMPONENTS, 2)


def draw_shared(drives: list[str], shots: int, seed: int) -> SharedNoise:
    """The shared numbers of `shots` shots, in a fixed order (drives sorted by name)."""
    rng = np.random.default_rng([seed, SHARED_STREAM])
    phase = 2 * math.pi * rng.random(shots)
    offset = rng.standard_normal(shots)
    names = sorted(drives)
    intensity = {d: rng.standard_normal(shots) for d in names}
    detuning = {d: rng.standard_normal(shots) for d in names}
    bumps = {d: rng.standard_normal((shots, BUMP_COMPONENTS, 2)) for d in names}
    return SharedNoise(phase, offset, intensity, detuning, bumps)


def apply(shared: SharedNoise | None, model: Model, draws: Draws, rng: np.random.Generator) -> Draws:
    """The cluster's draws with the shared numbers put in (or, unshared, its own field offset)."""
    if shared is None:
        return replace(draws, field_offset=rng.standard_normal(draws.count))
    n = draws.count
    names = model_drives(model)
    intensity, detuning, bumps = draws.intensity.copy(), draws.detuning.copy(), draws.bumps.copy()
    for k, name in enumerate(names):
        intensity[:, k] = shared.intensity[name][:n]
        detuning[:, k] = shared.detuning[name][:n]
        bumps[:, k] = shared.bumps[name][:n]
    return replace(draws, intensity=intensity, detuning=detuning, bumps=bumps,
                   field_phase=shared.field_phase[:n], field_offset=shared.field_offset[:n])
