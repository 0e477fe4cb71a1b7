"""Imaging crosstalk: the imaging light of one species scatters photons off the other.

While species A is imaged, an atom of species B scatters the far-detuned
imaging light at Γ_sc (seqlang/atoms/scattering.py, Grimm, Weidemüller &
Ovchinnikov 2000). Over an imaging of duration T it scatters at least one photon
with P = 1 − exp(−Γ_sc·T). The noise source ``crosstalk`` counts each such atom
as dephased: in that shot its qubit gets a phase kick uniform in [0, 2π) at a
uniformly random moment of the imaging (so an echo train cannot refocus it).
Populations are kept (a documented simplification: Raman transitions, recoil
heating and loss are left out).
"""
from __future__ import annotations

import math

import numpy as np

from ..atoms.scattering import saturation_intensity_w_m2, scattering_rate_hz
from ..program.model import Program


def light(program: Program, imaged: str) -> tuple[float, float] | None:
    """(wavelength m, intensity W/m²) of the imaging light of a species, None if not declared."""
    imaging = program.rig.imaging.get(imaged)
    if imaging is None:
        return None
    data = program.rig.species[imaged].data
    intensity = imaging.extra.get("light_intensity")
    if intensity is None and imaging.extra.get("saturation") is not None:
        intensity = imaging.extra["saturation"] * saturation_intensity_w_m2(data)
    if intensity is None:
        return None
    return imaging.extra.get("light_wavelength", data.d2_wavelength_m), intensity


def rate_hz(program: Program, imaged: str, other: str) -> float:
    """Photons per second an atom of `other` scatters while `imaged` is imaged (0 if undeclared)."""
    found = light(program, imaged)
    if found is None or imaged == other:
        return 0.0
    return scattering_rate_hz(program.rig.species[other].data, *found)


def probability(program: Program, imaged: str, other: str) -> float:
    """P(at least one photon) for one atom of `other` over one imaging of `imaged`."""
    return 1.0 - math.exp(-rate_hz(program, imaged, other) * program.rig.imaging[imaged].duration_s)


def summary(program: Program, timeline) -> list[str]:
    """One line per imaging and other species, for `seqlang show`."""
    lines = []
    for event in (e for e in timeline.events if e.kind == "image"):
        for other in sorted(set(program.rig.species) - {event.species}):
            if light(program, event.species) is None or not program.sites_of(other):
                continue
            lines.append(f"  image {event.species} -> {event.record} (line {event.span.line}): a `{other}` atom "
                         f"scatters {rate_hz(program, event.species, other):.3g} photons/s, "
                         f"P = {probability(program, event.species, other):.3g} per atom over the imaging")
    return lines


def kicks(program: Program, model, draws):
    """Segment → (shots, sites) extra |1⟩ shift (rad/s) that carries each shot's phase kicks."""
    events = [(k, img) for k, img in enumerate(model.images)]
    p = np.array([[probability(program, img.species, sp) if sp != img.species else 0.0 for sp in model.species]
                  for _, img in events]).reshape(len(events), model.size)
    u = draws.crosstalk  # (shots, images, sites, 3): scatter?, when, phase
    scattered = u[..., 0] < p[None]
    when = np.array([img.start_s for _, img in events])[None, :, None] \
        + u[..., 1] * np.array([img.duration_s for _, img in events])[None, :, None]
    phase = 2 * math.pi * u[..., 2]

    def shift(segment) -> np.ndarray:
        if segment.duration_s <= 0:
            return np.zeros((u.shape[0], model.size))
        inside = scattered & (when >= segment.start_s) & (when < segment.start_s + segment.duration_s)
        return (np.where(inside, phase, 0.0).sum(axis=1)) / segment.duration_s
    return shift
