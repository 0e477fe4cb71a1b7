"""The fast engine: exact segment-by-segment propagation, batched over shots.

Every segment of the played timeline has constant couplings, so each is
propagated exactly by a matrix exponential; the exponentials of all noise
samples (shots) of a segment are taken in one batched call. Two forms:

* ``fast``: kets under the non-Hermitian H_eff = H − (i/2) Σ_k Γ_k L_k†L_k.
  Exact for every probability inside the simulated states when all dissipation
  ends in the loss level: the lost norm is the loss (of the whole cluster).
* ``lindblad``: density matrices under the full Lindblad equation, vectorised
  (row-major vec(AρB) = (A ⊗ Bᵀ) vec ρ), for dissipation that returns into the
  qubit space (decay branching, pure dephasing). Loss to |x⟩ is again lost trace.

Small problems use dense batched exponentials; large ones the exponential
action of the sparse generator (scipy's expm_multiply, Al-Mohy & Higham 2011).
Segments without drives are diagonal for kets and propagated as phases.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components
from scipy.sparse.linalg import expm_multiply
from threadpoolctl import threadpool_limits

from .basis import Basis
from .model import G1, LOST, RYD, Model, Segment
from .noise import Jump, Shots

DENSE_LIMIT = 700  # largest generator dimension exponentiated densely
BATCH_BYTES = 2**27  # memory allowed for one batch of dense propagators
MIN_WEIGHT = 1e-14
HISTORY_STEPS = 40


@dataclass
class Run:
    """Outcome labels of each branch and its states for every shot (unnormalised)."""

    outcomes: list[tuple]
    states: list[np.ndarray]  # (B, D) kets or (B, D, D) density matrices per branch
    history: list[tuple[float, np.ndarray]]


def needs_lindblad(jumps: list[Jump]) -> bool:
    """True when some dissipation ends inside the simulated states (not in the loss level)."""
    return any(j.target != LOST for j in jumps)


def run(basis: Basis, shots: Shots, jumps: list[Jump], density: bool,
        image_loss: dict[str, float] | None = None, record_history: bool = False,
        progress=None) -> Run:
    """Propagate all shots through the model's segments, branching at each imaging."""
    stepper = _Stepper(basis, shots, jumps, density)
    kets = np.stack([basis.state(levels) for levels in shots.initial])
    states = [np.einsum("bi,bj->bij", kets, kets.conj()) if density else kets]
    outcomes: list[tuple] = [()]
    history: list[tuple[float, np.ndarray]] = []
    segments = shots.model.segments
    images = 0
    for k, segment in enumerate(segments):
        if segment.image is not None:
            draws = shots.image_draws[images] if shots.image_draws else None
            outcomes, states = _image(basis, shots.model, k, outcomes, states, density, image_loss or {}, draws)
            images += 1
            if record_history:
                history.append((segment.start_s, _populations(basis, states, density)))
        elif segment.duration_s > 0:
            for t0, dt in _pieces(segment, record_history):
                states = stepper.step(k, t0, dt, states)
                if record_history:
                    history.append((t0 + dt, _populations(basis, states, density)))
        if progress is not None:
            progress(k + 1, len(segments))
    return Run(outcomes, states, history)


def _pieces(segment: Segment, fine: bool) -> list[tuple[float, float]]:
    if not fine or not segment.couplings:
        return [(segment.start_s, segment.duration_s)]
    step = segment.duration_s / HISTORY_STEPS
    return [(segment.start_s + i * step, step) for i in range(HISTORY_STEPS)]


class _Stepper:
    """Builds the batched generator of a segment and applies its exponential."""

    def __init__(self, basis: Basis, shots: Shots, jumps: list[Jump], density: bool):
        self.basis, self.shots, self.density = basis, shots, density
        self.loss_diag = np.zeros(basis.size)
        for j in jumps:
            self.loss_diag += j.rate * basis.mask(j.site, j.source)
        # Density matrices keep |x⟩ for sites that can be lost, so every jump lands in the basis.
        self.returning = [(basis.transition(j.site, j.source, j.target), j.rate) for j in jumps
                          if j.target != LOST or density]
        self.pair_masks = {}
        self.block_cache: dict[tuple, list[np.ndarray]] = {}
        self.transitions: dict[tuple[int, int, int], tuple[np.ndarray, np.ndarray]] = {}

    # -- generator ------------------------------------------------------------------
    def _transition(self, site: int, lower: int, upper: int):
        key = (site, lower, upper)
        if key not in self.transitions:
            self.transitions[key] = self.basis.transition(site, lower, upper)
        return self.transitions[key]

    def _pair_mask(self, pair: tuple[int, int]) -> np.ndarray:
        if pair not in self.pair_masks:
            self.pair_masks[pair] = self.basis.mask(pair[0], RYD) & self.basis.mask(pair[1], RYD)
        return self.pair_masks[pair]

    def parameters(self, k: int):
        """Segment k and its per-shot arrays (one row when shared by every shot)."""
        sh = self.shots
        return sh.model.segments[k], sh.couplings[k], sh.shifts[k], sh.shift_levels[k], sh.pairs, sh.interactions

    def diagonal(self, seg: Segment, couplings, shifts, levels, pairs, interactions):
        """(diagonal of H_eff, drive frame), rad/s, with as many rows as the widest parameter."""
        b = self.basis
        rows = max(couplings.shape[0], shifts.shape[0], interactions.shape[0])
        frame = np.zeros((rows, b.size))
        for j, c in enumerate(seg.couplings):
            frame -= couplings[:, j, 1:2] * b.mask(c.site, c.upper)
        diag = frame.astype(complex)
        for j, (site, level) in enumerate(levels):
            diag += (shifts[:, j, 0:1] - 0.5j * shifts[:, j, 1:2]) * b.mask(site, level)
        for j, pair in enumerate(pairs):
            diag += interactions[:, j:j + 1] * self._pair_mask(pair)
        return diag - 0.5j * self.loss_diag, frame

    def hamiltonian(self, seg: Segment, couplings, diag: np.ndarray) -> np.ndarray:
        """Dense H_eff per shot row, shape (rows, D, D)."""
        h = np.zeros((diag.shape[0], self.basis.size, self.basis.size), dtype=complex)
        for j, c in enumerate(seg.couplings):
            lower, upper = self._transition(c.site, c.lower, c.upper)
            value = 0.5 * couplings[:, j, 0] * np.exp(1j * couplings[:, j, 2])
            h[:, upper, lower] += value[:, None]
            h[:, lower, upper] += value.conj()[:, None]
        idx = np.arange(self.basis.size)
        h[:, idx, idx] += diag
        return h

    def sparse_hamiltonian(self, seg: Segment, couplings, diag: np.ndarray, row: int) -> sp.csr_matrix:
        parts_r, parts_c, parts_v = [np.arange(self.basis.size)], [np.arange(self.basis.size)], [diag[row]]
        for j, c in enumerate(seg.couplings):
            lower, upper = self._transition(c.site, c.lower, c.upper)
            value = 0.5 * couplings[row, j, 0] * np.exp(1j * couplings[row, j, 2])
            parts_r += [upper, lower]
            parts_c += [lower, upper]
            parts_v += [np.full(len(lower), value), np.full(len(lower), np.conj(value))]
        return sp.csr_matrix((np.concatenate(parts_v), (np.concatenate(parts_r), np.concatenate(parts_c))),
                             shape=(self.basis.size,) * 2)

    def liouvillian(self, h: np.ndarray, shifts: np.ndarray, levels) -> np.ndarray:
        """Dense vectorised Lindblad generator per shot row, from H_eff (rows, D, D), with the
        jumps into |x⟩ of the segment's scattering levels."""
        d = self.basis.size
        eye = np.eye(d)
        gen = -1j * np.einsum("bij,kl->bikjl", h, eye).reshape(-1, d * d, d * d)
        gen += 1j * np.einsum("ij,bkl->bikjl", eye, h.conj()).reshape(-1, d * d, d * d)
        for (sources, targets), rate in self.returning:
            rows = (targets[:, None] * d + targets[None, :]).ravel()
            cols = (sources[:, None] * d + sources[None, :]).ravel()
            gen[:, rows, cols] += rate
        for j, (site, level) in enumerate(levels):
            rate = shifts[:, j, 1]
            if np.any(rate > 0):
                sources, targets = self._transition(site, level, LOST)
                rows = (targets[:, None] * d + targets[None, :]).ravel()
                cols = (sources[:, None] * d + sources[None, :]).ravel()
                gen[:, rows, cols] += rate[:, None]
        return gen

    # -- propagation ------------------------------------------------------------------
    def step(self, k: int, t0: float, dt: float, states: list[np.ndarray]) -> list[np.ndarray]:
        seg, couplings, shifts, levels, pairs, interactions = self.parameters(k)
        diag, frame = self.diagonal(seg, couplings, shifts, levels, pairs, interactions)
        couplings = np.broadcast_to(couplings, (diag.shape[0],) + couplings.shape[1:])
        stacked = np.stack(states)  # (K, B, D) or (K, B, D, D)
        stacked = _rotate(stacked, np.exp(-1j * frame * t0), self.density)
        if not seg.couplings and not self.returning:
            stacked = self._diagonal_step(stacked, diag, dt)
        elif self.density:
            stacked = self._lindblad_step(seg, couplings, diag, dt, stacked, shifts, levels)
        else:
            stacked = self._ket_step(seg, couplings, diag, dt, stacked)
        stacked = _rotate(stacked, np.exp(1j * frame * (t0 + dt)), self.density)
        return list(stacked)

    def _diagonal_step(self, stacked: np.ndarray, diag: np.ndarray, dt: float) -> np.ndarray:
        phase = np.exp(-1j * diag * dt)[None]  # (1, rows, D)
        if not self.density:
            return stacked * phase
        return stacked * phase[..., :, None] * phase.conj()[..., None, :]

    def _ket_step(self, seg, couplings, diag, dt, stacked):
        blocks = self.blocks(seg)
        if max(idx.shape[1] for idx in blocks) > DENSE_LIMIT:
            return self._sparse_ket_step(seg, couplings, diag, dt, stacked)
        out = np.empty_like(stacked)
        for idx in blocks:
            for lo, hi in _chunks(diag.shape[0], idx.shape[1], idx.shape[0]):
                u = batched_expm(-1j * dt * self.block_hamiltonian(seg, couplings[lo:hi], diag[lo:hi], idx))
                # u: (rows, blocks, k, k); states: (branches, rows, D)
                part = stacked[:, lo:hi] if diag.shape[0] > 1 else stacked
                block_states = part[..., idx]  # (K, rows, blocks, k)
                out_rows = slice(lo, hi) if diag.shape[0] > 1 else slice(None)
                out[:, out_rows][..., idx] = np.einsum("rmij,krmj->krmi", u, block_states) if diag.shape[0] > 1 \
                    else np.einsum("mij,krmj->krmi", u[0], block_states)
        return out

    def _sparse_ket_step(self, seg, couplings, diag, dt, stacked):
        rows, d = diag.shape[0], self.basis.size
        out = np.empty_like(stacked)
        for r in range(rows):
            gen = -1j * dt * self.sparse_hamiltonian(seg, couplings, diag, r)
            if rows == 1:
                flat = stacked.reshape(-1, d).T
                return expm_multiply(gen, flat).T.reshape(stacked.shape)
            out[:, r] = expm_multiply(gen, stacked[:, r].T).T
        return out

    def blocks(self, seg: Segment) -> list[np.ndarray]:
        """Index arrays (blocks, k) of the states the segment's couplings connect, grouped by size k."""
        key = tuple((c.site, c.lower, c.upper) for c in seg.couplings)
        if key not in self.block_cache:
            d = self.basis.size
            rows = [np.arange(d)]
            cols = [np.arange(d)]
            for site, lower, upper in key:
                lo, up = self._transition(site, lower, upper)
                rows.append(lo)
                cols.append(up)
            graph = sp.csr_matrix((np.ones(sum(len(r) for r in rows)), (np.concatenate(rows), np.concatenate(cols))),
                                  shape=(d, d))
            _, labels = connected_components(graph, directed=False)
            self.block_cache[key] = _group_by_size(labels)
        return self.block_cache[key]

    def block_hamiltonian(self, seg: Segment, couplings, diag: np.ndarray, idx: np.ndarray) -> np.ndarray:
        """H_eff restricted to equal-size blocks `idx`: shape (rows, blocks, k, k)."""
        m, k = idx.shape
        where = np.full(self.basis.size, -1)
        where[idx.ravel()] = np.arange(m * k)
        h = np.zeros((diag.shape[0], m * k, k), dtype=complex)
        pos = np.arange(m * k)
        h[:, pos, pos % k] = diag[:, idx.ravel()]
        for j, c in enumerate(seg.couplings):
            lower, upper = self._transition(c.site, c.lower, c.upper)
            lo, up = where[lower], where[upper]
            inside = lo >= 0
            lo, up = lo[inside], up[inside]
            value = 0.5 * couplings[:, j, 0] * np.exp(1j * couplings[:, j, 2])
            h[:, up, lo % k] += value[:, None]
            h[:, lo, up % k] += value.conj()[:, None]
        return h.reshape(diag.shape[0], m, k, k)

    def _lindblad_step(self, seg, couplings, diag, dt, stacked, shifts, levels):
        rows, d = diag.shape[0], self.basis.size
        kb = stacked.shape[:2]
        vec = stacked.reshape(kb[0], kb[1], d * d)
        out = np.empty_like(vec)
        shifts = np.broadcast_to(shifts, (rows,) + shifts.shape[1:])
        for lo, hi in _chunks(rows, d * d):
            gen = self.liouvillian(self.hamiltonian(seg, couplings[lo:hi], diag[lo:hi]), shifts[lo:hi], levels) * dt
            part = vec[:, lo:hi] if rows > 1 else vec
            result = out[:, lo:hi] if rows > 1 else out
            for idx in _superop_blocks(gen):
                if idx.shape[1] > DENSE_LIMIT:
                    for r in range(hi - lo):
                        sub = sp.csr_matrix(gen[r][np.ix_(idx.ravel(), idx.ravel())])
                        cols = slice(None) if rows == 1 else slice(r, r + 1)
                        block = part[:, cols][..., idx.ravel()].reshape(-1, idx.size).T
                        result[:, cols][..., idx.ravel()] = expm_multiply(sub, block).T.reshape(
                            part[:, cols].shape[:2] + (idx.size,))
                    continue
                u = batched_expm(gen[:, idx[:, :, None], idx[:, None, :]])  # (rows, blocks, k, k)
                if rows > 1:
                    result[..., idx] = np.einsum("rmij,krmj->krmi", u, part[..., idx])
                else:
                    result[..., idx] = np.einsum("mij,krmj->krmi", u[0], part[..., idx])
        return out.reshape(stacked.shape)


def _superop_blocks(gen: np.ndarray) -> list[np.ndarray]:
    """Equal-size groups of the vectorised density-matrix elements the generator connects."""
    pattern = sp.csr_matrix(np.any(gen != 0, axis=0))
    _, labels = connected_components(pattern, directed=False)
    return _group_by_size(labels)


def _chunks(rows: int, n: int, blocks: int = 1) -> list[tuple[int, int]]:
    """Batches of shot rows whose dense propagators fit in BATCH_BYTES."""
    per = max(1, BATCH_BYTES // (16 * 6 * n * n * blocks))
    return [(lo, min(rows, lo + per)) for lo in range(0, rows, per)]


def _group_by_size(labels: np.ndarray) -> list[np.ndarray]:
    """Connected components as index arrays, one (count, size) array per component size."""
    order = np.argsort(labels, kind="stable")
    sizes = np.bincount(labels)
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    groups: dict[int, list[np.ndarray]] = {}
    for label, (start, size) in enumerate(zip(starts, sizes)):
        groups.setdefault(int(size), []).append(order[start:start + size])
    return [np.array(members) for _, members in sorted(groups.items())]


# Padé [13/13] coefficients and the norm bound θ₁₃ of scaling and squaring
# (Higham, SIAM J. Matrix Anal. Appl. 26, 1179 (2005)).
_PADE13 = (64764752532480000.0, 32382376266240000.0, 7771770303897600.0, 1187353796428800.0, 129060195264000.0,
           10559470521600.0, 670442572800.0, 33522128640.0, 1323241920.0, 40840800.0, 960960.0, 16380.0, 182.0, 1.0)
_THETA13 = 5.371920351148152


def batched_expm(a: np.ndarray) -> np.ndarray:
    """exp of every matrix of a stack (..., k, k), all at once.

    Scaling and squaring with the [13/13] Padé approximant (Higham 2005), each
    matrix scaled by its own power of two; vectorised over the stack, where
    scipy.linalg.expm loops in Python over a stack's matrices.
    """
    shape = a.shape
    if shape[-1] == 1:
        return np.exp(a)
    m = a.reshape(-1, shape[-2], shape[-1])
    norms = np.abs(m).sum(axis=1).max(axis=1)
    squarings = np.maximum(0, np.ceil(np.log2(np.maximum(norms, 1e-300) / _THETA13))).astype(int)
    m = m / (2.0 ** squarings)[:, None, None]
    b = _PADE13
    eye = np.eye(shape[-1])
    with threadpool_limits(1):
        m2 = m @ m
        m4 = m2 @ m2
        m6 = m4 @ m2
        u = m @ (m6 @ (b[13] * m6 + b[11] * m4 + b[9] * m2) + b[7] * m6 + b[5] * m4 + b[3] * m2 + b[1] * eye)
        v = m6 @ (b[12] * m6 + b[10] * m4 + b[8] * m2) + b[6] * m6 + b[4] * m4 + b[2] * m2 + b[0] * eye
        r = np.linalg.solve(v - u, v + u)
        for step in range(int(squarings.max(initial=0))):
            more = squarings > step
            r[more] = r[more] @ r[more]
    return r.reshape(shape)


def _rotate(stacked: np.ndarray, phases: np.ndarray, density: bool) -> np.ndarray:
    """Apply a diagonal unitary per shot row (rows broadcast over branches)."""
    if not density:
        return stacked * phases[None]
    return stacked * phases[None, :, :, None] * phases.conj()[None, :, None, :]


def _image(basis: Basis, model: Model, k: int, outcomes, states, density: bool, image_loss: dict, draws):
    """Split every branch by the imaged atoms' outcomes (bright = |1⟩); bright atoms may be lost."""
    image = model.segments[k].image
    sites = [i for i, name in enumerate(model.sites) if name in image.targets]
    bright = {i: basis.mask(i, G1) for i in sites}
    new_outcomes, new_states = [], []
    for labels, state in zip(outcomes, states):
        for bits in _bit_patterns(len(sites)):
            keep = np.ones(basis.size, bool)
            for site, bit in zip(sites, bits):
                keep &= bright[site] if bit else ~bright[site]
            projected = state * keep if not density else state * keep[:, None] * keep[None, :]
            if _weights(projected, density).max() <= MIN_WEIGHT:
                continue
            for n, (site, bit) in enumerate(zip(sites, bits)):
                loss = image_loss.get(model.species[site], 0.0)
                if bit and loss > 0:
                    chance = draws[:, n] if draws is not None else np.ones(state.shape[0])
                    projected = _lose(basis, projected, site, loss, chance, density)
            new_outcomes.append(labels + tuple((image.record, model.sites[s], b) for s, b in zip(sites, bits)))
            new_states.append(projected)
    return new_outcomes, new_states


def _bit_patterns(count: int):
    return [tuple((n >> (count - 1 - i)) & 1 for i in range(count)) for n in range(2**count)]


def _lose(basis: Basis, state: np.ndarray, site: int, loss: float, draws: np.ndarray, density: bool):
    """A bright atom is lost (|1⟩ → |x⟩) with probability `loss`: sampled per shot for kets,
    as the channel ρ → (1−p)ρ + p XρX† for density matrices."""
    src, dst = basis.transition(site, G1, LOST)
    if density:
        moved = np.zeros_like(state)
        moved[..., dst[:, None], dst[None, :]] = state[..., src[:, None], src[None, :]]
        return (1 - loss) * state + loss * moved
    lost = draws < loss
    out = state.copy()
    out[lost] = 0
    out[np.ix_(lost, dst)] = state[np.ix_(lost, src)]
    return out


def _weights(state: np.ndarray, density: bool) -> np.ndarray:
    if density:
        return np.real(np.trace(state, axis1=-2, axis2=-1))
    return np.sum(np.abs(state) ** 2, axis=-1)


def _populations(basis: Basis, states: list[np.ndarray], density: bool) -> np.ndarray:
    from .basis import site_populations
    probs = sum(np.real(np.diagonal(s, axis1=-2, axis2=-1)).mean(axis=0) if density
                else (np.abs(s) ** 2).mean(axis=0) for s in states)
    return site_populations(basis, probs)


def blockade_truncation(model: Model, tolerance: float) -> tuple[tuple[tuple[int, int], ...], float]:
    """Pairs whose |rr⟩ can be dropped, and the bound Σ 2Ω²/V² on its population.

    A pair driven from its singly excited states couples to |rr⟩ with √2·Ω/2 and
    is detuned by V, so |rr⟩ never holds more than 2Ω²/(2Ω² + V²) ≤ 2Ω²/V² (derived;
    Ω the largest Rydberg Rabi frequency of the sequence).
    """
    omega = max((abs(c.omega) for seg in model.segments for c in seg.couplings if RYD in (c.lower, c.upper)),
                default=0.0)
    pairs, bound = [], 0.0
    for pair, v in sorted(model.interactions.items()):
        share = 2 * omega**2 / v**2 if v else math.inf
        if share <= tolerance:
            pairs.append(pair)
            bound += share
    return tuple(pairs), bound


__all__ = ["Run", "batched_expm", "blockade_truncation", "needs_lindblad", "run"]
