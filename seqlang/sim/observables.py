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


# Named single-site states for product targets (`expect a, b as plus * zero`).
SINGLE = {
    "zero": np.array([1, 0], dtype=complex),
    "one": np.array([0, 1], dtype=complex),
    "plus": np.array([_S, _S], dtype=complex),
    "minus": np.array([_S, -_S], dtype=complex),
    "plus_i": np.array([_S, 1j * _S], dtype=complex),
    "minus_i": np.array([_S, -1j * _S], dtype=complex),
}
MANY = ("ghz", "w")  # named states of any number of atoms


def target_state(state: str, is_ket: bool, count: int | None = None, phase: float = 0.0) -> np.ndarray:
    """The expected state as a vector in the computational basis (first site = leftmost bit);
    named many-atom states default to two atoms."""
    return target_vector(state, is_ket, 2 if count is None else count, phase)


def target_vector(state: str, is_ket: bool, count: int | None = None, phase: float = 0.0) -> np.ndarray:
    """Kets "0110"; Bell states; "ghz" (|0…0⟩ + e^{iφ}|1…1⟩)/√2; "w" (Σ one excitation)/√n;
    products of single-site states "plus*zero*minus"."""
    if is_ket:
        vector = np.zeros(2 ** len(state), dtype=complex)
        vector[int(state, 2)] = 1.0
        return vector
    if state in BELL:
        return BELL[state]
    if state == "ghz":
        vector = np.zeros(2**count, dtype=complex)
        vector[0], vector[-1] = _S, _S * np.exp(1j * phase)
        return vector
    if state == "w":
        vector = np.zeros(2**count, dtype=complex)
        vector[[2**k for k in range(count)]] = 1 / math.sqrt(count)
        return vector
    vector = np.array([1.0 + 0j])
    for name in state.split("*"):
        vector = np.kron(vector, SINGLE[name])
    return vector


def pauli_string(labels: str) -> np.ndarray:
    """σ_a ⊗ σ_b ⊗ … for a string of I, X, Y, Z."""
    out = np.array([[1.0 + 0j]])
    for a in labels:
        out = np.kron(out, PAULI[a] if a != "I" else np.eye(2))
    return out


def pauli_expectations(block: np.ndarray, strings) -> dict[str, float]:
    """⟨σ…σ⟩ of the qubit block for each requested string (N-body correlators)."""
    return {s: clean(np.real(np.trace(block @ pauli_string(s)))) for s in strings}


def ghz_numbers(block: np.ndarray, count: int) -> dict:
    """Populations of |0…0⟩ and |1…1⟩, the parity-oscillation coherence C = 2|ρ₀…₀,₁…₁| (the
    amplitude of ⟨Π(φ)⟩ = C cos(Nφ + θ)), its phase θ, and the fidelity to the best-phased
    GHZ state F = (P₀…₀ + P₁…₁)/2 + C/2 (Sackett et al., Nature 404, 256 (2000))."""
    p0, p1 = float(np.real(block[0, 0])), float(np.real(block[-1, -1]))
    c = 2 * abs(block[0, -1])
    return {"p_all_zero": clean(p0), "p_all_one": clean(p1), "coherence": clean(c),
            "coherence_phase_rad": clean(float(np.angle(block[-1, 0]))) if c > 1e-12 else 0.0,
            "parity_fidelity": clean((p0 + p1) / 2 + c / 2)}


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


def summarize_block(block: np.ndarray, count: int, state: str, is_ket: bool, rydberg: float, lost: float,
                    phase: float = 0.0) -> dict:
    """As `summarize`, from the qubit block and the probabilities of |r⟩ and loss."""
    target = target_vector(state, is_ket, count, phase)
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


def summarize(rho: np.ndarray, count: int, state: str, is_ket: bool, phase: float = 0.0) -> dict:
    """Fidelity, populations, correlators, residual Rydberg and loss of `count` atoms."""
    block = qubit_block(rho, count)
    target = target_vector(state, is_ket, count, phase)
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
