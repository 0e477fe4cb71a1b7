"""From final branches to fidelities, populations and correlators.

Qubits are ordered as the sites are named (first site = leftmost bit). All
numbers refer to the computational subspace {|0⟩, |1⟩} of the named sites;
population in |r⟩ or lost is reported separately and counts as infidelity.
"""
from __future__ import annotations

import itertools
import math

import numpy as np

from .model import DIM, LOST, RYD

PAULI = {
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]], dtype=complex),
    "Z": np.array([[1, 0], [0, -1]], dtype=complex),
}
_S = 1 / math.sqrt(2)
BELL = {
    "phi_plus": np.array([_S, 0, 0, _S], dtype=complex),
    "phi_minus": np.array([_S, 0, 0, -_S], dtype=complex),
    "psi_plus": np.array([0, _S, _S, 0], dtype=complex),
    "psi_minus": np.array([0, _S, -_S, 0], dtype=complex),
}


def target_state(state: str, is_ket: bool) -> np.ndarray:
    """The expected state as a vector in the computational basis."""
    if not is_ket:
        return BELL[state]
    vector = np.zeros(2 ** len(state), dtype=complex)
    vector[int(state, 2)] = 1.0
    return vector


def partial_trace(rho: np.ndarray, size: int, keep: list[int]) -> np.ndarray:
    """Reduced density matrix of the sites `keep` (in that order) of `size` four-level atoms."""
    tensor = rho.reshape([DIM] * (2 * size))
    traced = [i for i in range(size) if i not in keep]
    letters = "abcdefghijklmnopqrstuvwxyz"
    rows = [letters[i] for i in range(size)]
    cols = [letters[i].upper() for i in range(size)]
    for i in traced:
        cols[i] = rows[i]
    out = "".join(rows[i] for i in keep) + "".join(cols[i] for i in keep)
    reduced = np.einsum("".join(rows) + "".join(cols) + "->" + out, tensor)
    d = DIM ** len(keep)
    return reduced.reshape(d, d)


def qubit_block(rho: np.ndarray, count: int) -> np.ndarray:
    """The {0,1}^count block of a reduced density matrix of `count` atoms."""
    index = [sum(bit * DIM ** (count - 1 - k) for k, bit in enumerate(bits))
             for bits in itertools.product((0, 1), repeat=count)]
    return rho[np.ix_(index, index)]


def level_probability(rho: np.ndarray, count: int, level: int) -> float:
    """Probability that at least one of the atoms is in `level`."""
    diag = np.real(np.diag(rho)).reshape([DIM] * count)
    none = diag
    for axis in range(count):
        none = np.delete(none, level, axis=axis)
    return float(np.real(np.trace(rho)) - none.sum())


def summarize_block(block: np.ndarray, count: int, state: str, is_ket: bool, rydberg: float, lost: float) -> dict:
    """As `summarize`, from the qubit block and the probabilities of |r⟩ and loss."""
    target = target_state(state, is_ket)
    out = {
        "fidelity": clean(np.real(np.vdot(target, block @ target))),
        "populations": {"".join(map(str, bits)): clean(np.real(block[i, i]))
                        for i, bits in enumerate(itertools.product((0, 1), repeat=count))},
        "residual_rydberg": clean(rydberg),
        "loss": clean(lost),
    }
    if count == 2:
        out["correlators"] = correlators(block)
    return out


def summarize(rho: np.ndarray, count: int, state: str, is_ket: bool) -> dict:
    """Fidelity, populations, correlators, residual Rydberg and loss of `count` atoms."""
    block = qubit_block(rho, count)
    target = target_state(state, is_ket)
    out = {
        "fidelity": clean(np.real(np.vdot(target, block @ target))),
        "populations": {"".join(map(str, bits)): clean(np.real(block[i, i]))
                        for i, bits in enumerate(itertools.product((0, 1), repeat=count))},
        "residual_rydberg": clean(level_probability(rho, count, RYD)),
        # Lost norm (fast engine) and population in |x⟩ (density engines) are both loss.
        "loss": clean(max(0.0, 1 - np.real(np.trace(rho)) + level_probability(rho, count, LOST))),
    }
    if count == 2:
        out["correlators"] = correlators(block)
    return out


def correlators(block: np.ndarray) -> dict[str, float]:
    """⟨σa ⊗ σb⟩ for a, b in X, Y, Z over the two-qubit block."""
    return {a + b: clean(np.real(np.trace(block @ np.kron(PAULI[a], PAULI[b]))))
            for a in "XYZ" for b in "XYZ"}


def ideal_correlators(state: str, is_ket: bool) -> dict[str, float]:
    target = target_state(state, is_ket)
    return correlators(np.outer(target, target.conj()))


def clean(x: float) -> float:
    """Round to 12 decimals so that printed results are reproducible byte for byte."""
    value = round(float(x), 12)
    return 0.0 if value == 0 else value
