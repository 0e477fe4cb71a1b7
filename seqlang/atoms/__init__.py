"""Atomic-physics data: species table, clock qubits, Rydberg levels and interactions.

``species`` is pure Python and fast to import. ``rydberg`` wraps the alkali
Rydberg calculator library (imported lazily) behind the disk cache of ``cache``.
See docs/atomic-data.md for sources, units and sign conventions.
"""

from seqlang.atoms.cache import cache_dir, cached
from seqlang.atoms.rydberg import (
    C6Result,
    LifetimeResult,
    blockade_radius_m,
    c6_hz_m6,
    default_intermediate,
    dipole_matrix_element_ea0,
    energy_hz,
    interaction_hz,
    intermediate_linewidth_hz,
    lifetime_s,
    reduced_dipole_ea0,
)
from seqlang.atoms.species import (
    QubitState,
    RydbergLevel,
    SpeciesData,
    clock_states,
    hyperfine_manifolds,
    lookup,
    names,
    parse_level,
    qubit_frequency_hz,
)

__all__ = [
    "C6Result", "LifetimeResult", "QubitState", "RydbergLevel", "SpeciesData",
    "blockade_radius_m", "c6_hz_m6", "cache_dir", "cached", "clock_states",
    "default_intermediate", "dipole_matrix_element_ea0", "energy_hz",
    "hyperfine_manifolds", "interaction_hz", "intermediate_linewidth_hz",
    "lifetime_s", "lookup", "names", "parse_level", "qubit_frequency_hz",
    "reduced_dipole_ea0",
]
