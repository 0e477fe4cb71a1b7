"""The QuTiP reference path: propagate a model segment by segment, one shot at a time.

Each segment has a constant Hamiltonian, so it is propagated on its own and
exactly, with QuTiP's matrix exponential (or the exponential of the Liouvillian
when collapse operators are given): a short pulse after a long wait can never be
skipped by an adaptive step. ``sesolve_step`` repeats a step with QuTiP's
adaptive solver for cross-checks. Segments with
no drive evolve under the diagonal interaction only and are propagated exactly.
Imaging projects the imaged atoms on "bright" (|1⟩) or "dark" (anything else)
and splits each branch in two per atom; branch weights are their norms.
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from .model import DIM, G1, LOST, Model, Segment, embed, hamiltonian, interaction_hamiltonian, projector

MIN_WEIGHT = 1e-14
HISTORY_STEPS = 40  # samples per driven segment when populations are recorded for a plot
SOLVER_OPTIONS = {"atol": 1e-11, "rtol": 1e-9, "nsteps": 100_000}


@dataclass(frozen=True)
class Branch:
    """One measurement history: outcomes so far and the (unnormalised) state."""

    outcomes: tuple[tuple[str, str, int], ...]  # (record, site, bit)
    state: np.ndarray  # ket (vector) or density matrix

    @property
    def weight(self) -> float:
        if self.state.ndim == 1:
            return float(np.vdot(self.state, self.state).real)
        return float(np.trace(self.state).real)


def initial_state(size: int, density: bool = False, dim: int = DIM) -> np.ndarray:
    """All atoms in |0⟩ (optical pumping into the lower clock state)."""
    psi = np.zeros(dim**size, dtype=complex)
    psi[0] = 1.0
    return np.outer(psi, psi.conj()) if density else psi


def propagate(model: Model, c_ops: list[np.ndarray] | None = None, record_history: bool = False,
              initial: np.ndarray | None = None, image_loss: dict[str, float] | None = None,
              image_draws: tuple = ()) -> tuple[list[Branch], list[tuple[float, np.ndarray]]]:
    """Final branches, and (if asked) populations of each level per site after each segment.

    `initial` is a ket (default: all atoms in |0⟩); with collapse operators the
    state is carried as a density matrix. `image_loss` (species → probability)
    loses bright atoms while imaged: by the shot's `image_draws` for kets, as a
    channel for density matrices.
    """
    density = bool(c_ops)
    psi = initial if initial is not None else initial_state(model.size, False, model.dim)
    branches = [Branch((), np.outer(psi, psi.conj()) if density else psi)]
    history: list[tuple[float, np.ndarray]] = []
    h_int = np.diag(interaction_hamiltonian(model)).real
    images = 0
    for segment in model.segments:
        if segment.image is not None:
            draws = image_draws[images] if image_draws else None
            branches = _measure(model, branches, segment, image_loss or {}, draws)
            images += 1
            if record_history:
                history.append((segment.start_s, level_populations(model, branches)))
        elif segment.duration_s > 0:
            for piece in _pieces(segment, record_history):
                h_pairs = h_int if segment.interactions is None else \
                    np.diag(interaction_hamiltonian(model, segment)).real
                branches = [Branch(b.outcomes, _evolve(model, piece, b.state, h_pairs, c_ops)) for b in branches]
                if record_history:
                    history.append((piece.start_s + piece.duration_s, level_populations(model, branches)))
    return branches, history


def _pieces(segment: Segment, fine: bool) -> list[Segment]:
    """The segment itself, or (for drawing populations) equal sub-steps of a driven segment."""
    if not fine or not segment.couplings:
        return [segment]
    step = segment.duration_s / HISTORY_STEPS
    return [Segment(segment.start_s + k * step, step, segment.couplings, shifts=segment.shifts,
                    interactions=segment.interactions) for k in range(HISTORY_STEPS)]


def _evolve(model: Model, segment: Segment, state: np.ndarray, h_int: np.ndarray, c_ops) -> np.ndarray:
    losses = [(s.site, s.level, s.loss_rate) for s in segment.shifts if s.loss_rate > 0]
    if not segment.couplings and not c_ops and not losses:
        phase = np.exp(-1j * (h_int + _shift_diagonal(model, segment)) * segment.duration_s)
        return phase * state if state.ndim == 1 else np.outer(phase, phase.conj()) * state
    frame = detuning_frame(model, segment)
    t0, t1 = segment.start_s, segment.start_s + segment.duration_s
    state = _rotate(state, np.exp(-1j * frame * t0))
    h = hamiltonian(model, segment)
    ops = list(c_ops or [])
    for site, level, rate in losses:
        jump = np.zeros((model.dim, model.dim), dtype=complex)
        jump[LOST, level] = np.sqrt(rate)
        if state.ndim == 1:  # kets: the no-jump part, H − (i/2)Γ|l⟩⟨l|
            h = h - 0.5j * rate * embed(projector(level, model.dim), site, model.size)
        else:
            ops.append(embed(jump, site, model.size))
    state = _qutip_step(h, state, segment.duration_s, ops if state.ndim == 2 else None, model.size, model.dim)
    return _rotate(state, np.exp(1j * frame * t1))


def _shift_diagonal(model: Model, segment: Segment) -> np.ndarray:
    """The level shifts of a segment without drives, as the diagonal of H (rad/s)."""
    levels = np.indices([model.dim] * model.size).reshape(model.size, -1)
    diag = np.zeros(model.dim**model.size)
    for s in segment.shifts:
        diag += s.shift * (levels[s.site] == s.level)
    return diag


def detuning_frame(model: Model, segment: Segment) -> np.ndarray:
    """Diagonal D = −Σ Δ_c |b⟩⟨b| of the segment's drive frame (rad/s).

    Drives are phase-continuous oscillators at (atom frequency + detuning) whose
    phase is referenced to t = 0, as a phase-coherent synthesizer plays them.
    The segment is solved in the drive frame, and mapped back to the atom frame:
    ψ(t₁) = e^{iDt₁} e^{−iH_D(t₁−t₀)} e^{−iDt₀} ψ(t₀).
    """
    levels = np.indices([model.dim] * model.size).reshape(model.size, -1)
    diag = np.zeros(model.dim**model.size)
    for c in segment.couplings:
        diag -= c.delta * (levels[c.site] == c.upper)
    return diag


def _rotate(state: np.ndarray, phases: np.ndarray) -> np.ndarray:
    """Apply a diagonal unitary to a ket or (on both sides) to a density matrix."""
    if state.ndim == 1:
        return phases * state
    return phases[:, None] * state * phases.conj()[None, :]


def _qutip_step(h: np.ndarray, state: np.ndarray, duration: float, c_ops, size: int,
                dim: int = DIM) -> np.ndarray:
    """Exact propagation over one constant segment with QuTiP's matrix exponential.

    Pure states: exp(−iHt)|ψ⟩. With collapse operators: the exponential of the
    Liouvillian acting on the vectorised density matrix. Exact for a constant
    Hamiltonian, so it neither skips a pulse nor struggles with stiff GHz pair shifts.
    """
    import qutip
    dims = [[dim] * size, [dim] * size]
    hq = qutip.Qobj(h, dims=dims)
    if not c_ops and state.ndim == 1:
        return ((-1j * duration) * hq).expm().full() @ state
    superop = (qutip.liouvillian(hq, [qutip.Qobj(c, dims=dims) for c in c_ops]) * duration).expm()
    rho = qutip.Qobj(state, dims=dims)
    return qutip.vector_to_operator(superop * qutip.operator_to_vector(rho)).full()


def sesolve_step(h: np.ndarray, state: np.ndarray, duration: float, size: int) -> np.ndarray:
    """The same step with QuTiP's adaptive `sesolve`, kept as an independent cross-check."""
    import qutip
    hq = qutip.Qobj(h * 1e-6, dims=[[DIM] * size, [DIM] * size])
    psi = qutip.Qobj(state, dims=[[DIM] * size, [1] * size])
    out = qutip.sesolve(hq, psi, [0.0, duration * 1e6], options=SOLVER_OPTIONS)
    return out.states[-1].full().ravel()


def _measure(model: Model, branches: list[Branch], segment: Segment, image_loss: dict, draws) -> list[Branch]:
    image = segment.image
    sites = [i for i, name in enumerate(model.sites) if name in image.targets]
    bright = {i: embed(projector(G1, model.dim), i, model.size) for i in sites}
    identity = np.eye(model.dim**model.size)
    out = []
    for branch in branches:
        for bits in itertools.product((0, 1), repeat=len(sites)):
            p = identity
            for site, bit in zip(sites, bits):
                p = p @ (bright[site] if bit else identity - bright[site])
            state = p @ branch.state if branch.state.ndim == 1 else p @ branch.state @ p
            for k, (site, bit) in enumerate(zip(sites, bits)):
                loss = image_loss.get(model.species[site], 0.0)
                if bit and loss > 0:
                    state = _lose_bright(model, state, site, loss, 1.0 if draws is None else draws[k])
            labels = tuple((image.record, model.sites[s], b) for s, b in zip(sites, bits))
            candidate = Branch(branch.outcomes + labels, state)
            if candidate.weight > MIN_WEIGHT:
                out.append(candidate)
    return out


def _lose_bright(model: Model, state: np.ndarray, site: int, loss: float, draw: float) -> np.ndarray:
    """|1⟩ → |x⟩ of an imaged bright atom: sampled (kets) or as a channel (density matrices)."""
    move = np.zeros((model.dim, model.dim), dtype=complex)
    move[LOST, G1] = 1.0
    x = embed(move, site, model.size)
    if state.ndim == 2:
        return (1 - loss) * state + loss * x @ state @ x.conj().T
    return x @ state if draw < loss else state


def level_populations(model: Model, branches: list[Branch]) -> np.ndarray:
    """populations[site, level] summed over branches."""
    probs = np.zeros(model.dim**model.size)
    for b in branches:
        probs += np.abs(b.state) ** 2 if b.state.ndim == 1 else np.real(np.diag(b.state))
    grid = probs.reshape([model.dim] * model.size)
    return np.array([[grid.take(level, axis=i).sum() for level in range(model.dim)] for i in range(model.size)])


__all__ = ["Branch", "initial_state", "level_populations", "propagate"]
