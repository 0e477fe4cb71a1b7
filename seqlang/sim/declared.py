"""Which noise sources a rig and sequence leave undeclared, and why.

A source whose numbers the rig does not give (or that the sequence never meets:
imaging without an image) costs nothing in the model; the budget lists it as
"not declared" rather than as a zero, so that nobody reads it as measured to be
harmless.

>>> not_declared(seqlang.load("programs/bell_pair.seq"))["imaging"]   # doctest: +SKIP
'no image in the sequence'
"""
from __future__ import annotations

from .model import leg_rabi
from .noise import SOURCES


def not_declared(sequence) -> dict[str, str]:
    """Source name → the reason it has no effect on this sequence, for every such source."""
    program, events = sequence.program, sequence.played.events
    rig = program.rig
    used = {e.drive for e in events if e.kind == "pulse"}
    drives = [rig.drives[name] for name in rig.drives if name in used]
    rydberg = [d for d in drives if d.kind == "rydberg"]
    qubit_drives = [d for d in drives if d.kind != "rydberg"]
    species = [rig.species[s] for s in dict.fromkeys(site.species for site in program.sites.values())]
    imaged = any(e.kind == "image" for e in events)

    def extra(items, *keys) -> bool:
        return any(all(x.extra.get(k, 0.0) > 0 for k in keys) for x in items)

    hot = [s for s in species if s.temperature_k > 0]
    checks = {
        "decay": (bool(rydberg), "no Rydberg pulse in the sequence"),
        "dephasing": (extra(rydberg, "linewidth"), "no Rydberg drive in use declares `linewidth`"),
        "scattering": (any(leg_rabi(d, 1.0) for d in rydberg),
                       "no leg Rabi frequencies (`lower_rabi`, `upper_rabi`, `intermediate`)"),
        "laser_noise": (extra(rydberg, "linewidth", "servo_bump", "servo_height"),
                        "no Rydberg drive in use declares `linewidth`, `servo_bump` and `servo_height`"),
        "intensity": (extra(drives, "intensity_noise") or (extra(drives, "waist") and bool(hot)),
                      "no drive in use declares `intensity_noise` (or `waist` with a temperature)"),
        "doppler": (any(d.legs for d in rydberg) and any(s.temperature_k > 0 and s.name in
                                                         {d.species for d in rydberg} for s in species),
                    "no Rydberg drive in use declares its leg wavelengths for a species with a temperature"),
        "motion": (bool(rydberg) and any(s.extra.get("trap_radial", 0) > 0 or s.extra.get("trap_axial", 0) > 0
                                         for s in hot),
                   "no species declares a temperature with trap frequencies (or no Rydberg pulse)"),
        "detuning_error": (extra(qubit_drives, "detuning_error"),
                           "no microwave or Raman drive in use declares `detuning_error`"),
        "t2_star": (extra(species, "t2_star"), "no species in use declares `t2_star`"),
        "field_noise": (extra(species, "field_noise", "field_noise_freq"),
                        "no species in use declares `field_noise` and `field_noise_freq`"),
        "preparation": (extra(species, "prep_error"), "no species in use declares `prep_error`"),
        "imaging": (imaged, "no image in the sequence"),
    }
    if not rydberg:  # one reason says it all for the Rydberg sources
        checks.update({k: (False, "no Rydberg pulse in the sequence") for k in _RYDBERG_ONLY})
    return {name: checks[name][1] for name in SOURCES if name in checks and not checks[name][0]}


_RYDBERG_ONLY = ("decay", "dephasing", "scattering", "laser_noise", "doppler", "motion")
