"""The fast engine: exact segment-by-segment propagation, batched over shots.

Every segment of the played timeline has constant couplings, so each is
propagated exactly by a matrix exponential; the exponentials of all noise
samples (shots) of a segment are taken in one batched call. Two forms:

* ``fast``: kets under the non-Hermitian H_eff = H − (i/2) Σ_k Γ_k L_k†L_k.
  Exact for every probability inside the simulated states when all dissipation
  ends in the loss level: the lost norm is the loss (of the whole cluster).
* ``lindblad``: density matrices under the full Lindblad equation, vectorised
  (row-major vec(AρB) = (A ⊗ Bᵀ) vec ρ), for dissipation that returns into the
  qubit space (decay branching, pure dephasing); |x⟩ is kept where decay or
  scattering can lead, so every probability is exact.
* ``trajectories``: kets as in ``fast``, with pure dephasing L = √(2γ)|r⟩⟨r|
  unravelled as Gaussian phase kicks e^{−iφ n_r}, φ ~ N(0, 2γ·dt), drawn per shot
  and site between sub-steps of each driven segment (symmetric Trotter splitting;
  the kick average is exactly the dephasing channel of the sub-step). The shot
  average converges to the Lindblad result; sub-steps keep Ω·dt ≤ KICK_ANGLE.

The states a segment's couplings connect form blocks (an atom in |0⟩ sits out a
Rydberg pulse); each block holding amplitude is exponentiated on its own, densely
in batches, or, when large or cheaper so, by the exponential action of its sparse
generator (scipy's expm_multiply, Al-Mohy & Higham 2011). Segments without drives
are diagonal for kets and propagated as phases.
"""
from __future__ import annotations

import math
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components
from scipy.sparse.linalg import expm_multiply
from threadpoolctl import ThreadpoolController

from .basis import Basis, norms, probabilities, site_populations
from .model import G1, LOST, RYD, Model, Segment
from .noise import Jump, Shots

DENSE_LIMIT = 700  # largest generator dimension exponentiated densely
SPARSE_MIN = 64  # blocks at least this large may use the sparse exponential action
MAX_LINDBLAD_BLOCK = 4000  # density-matrix elements in one exponentiated group
BATCH_BYTES = 2**27  # memory allowed for one batch of dense propagators
MIN_WEIGHT = 1e-14
HISTORY_STEPS = 40
WORKERS = min(2, os.cpu_count() or 1)  # threads sharing a large stack of exponentials
PARALLEL_WORK = 2**18  # matrices × size³ above which a stack is split over the threads
KICK_ANGLE = 0.75  # largest Rabi angle Ω·dt of one sub-step between dephasing kicks (rad); the
# splitting then misses at most ~(Ω·dt)²/12 ≈ 5 % of the dephasing's own small effect
# Above this many squarings (‖A‖ ≳ 3·10⁵) scaling and squaring loses accuracy (each squaring
# doubles the rounding error); such exponentials are taken from an eigendecomposition.
MAX_SQUARINGS = 16


@dataclass
class Run:
    """Outcome labels of each branch and its states for every shot (unnormalised)."""

    outcomes: list[tuple]
    states: list[np.ndarray]  # (B, D) kets or (B, D, D) density matrices per branch
    history: list[tuple[float, np.ndarray]]


def needs_lindblad(jumps: list[Jump]) -> bool:
    """True when some dissipation ends inside the simulated states (not in the loss level)."""
    return any(j.target != LOST for j in jumps)


def is_dephasing(jump: Jump) -> bool:
    """A pure-dephasing operator √rate·|l⟩⟨l| (no population moves)."""
    return jump.source == jump.target


def can_unravel(jumps: list[Jump]) -> bool:
    """True when kets with phase kicks describe every jump: loss and pure dephasing only."""
    return all(j.target == LOST or is_dephasing(j) for j in jumps)


def run(basis: Basis, shots: Shots, jumps: list[Jump], density: bool,
        image_loss: dict[str, float] | None = None, record_history: bool = False,
        rng: np.random.Generator | None = None) -> Run:
    """Propagate all shots through the model's segments, branching at each imaging.

    For kets with pure-dephasing jumps, `rng` draws the phase kicks (see ``trajectories``)."""
    kicks = None
    if not density and any(is_dephasing(j) for j in jumps):
        if rng is None:
            raise ValueError("pure dephasing in kets needs phase-kick trajectories (a random generator)")
        kicks = _Kicks(basis, [j for j in jumps if is_dephasing(j)], shots.count, rng)
        jumps = [j for j in jumps if not is_dephasing(j)]
    with single_threaded_blas():
        return _run(basis, shots, jumps, density, image_loss, record_history, kicks)


class _Kicks:
    """Gaussian phase kicks that unravel pure dephasing √rate·|l⟩⟨l| (one stream per run)."""

    def __init__(self, basis: Basis, jumps: list[Jump], rows: int, rng: np.random.Generator):
        masks = np.array([basis.mask(j.site, j.source) for j in jumps], dtype=bool)  # (n, D)
        self.size = basis.size
        self.columns = np.nonzero(masks.any(axis=0))[0]  # only states with a dephased level get kicked
        # Per kicked state, the jumps whose level it holds (padded with a jump-free slot, factor 1):
        # its factor is the product of those few e^{−iφ}, gathered instead of exponentiated per state.
        held = masks.T
        width = max(1, int(held.sum(axis=1).max(initial=1)))
        self.gather = np.full((self.size, width), len(jumps))
        for k in self.columns:
            where = np.nonzero(held[k])[0]
            self.gather[k, :len(where)] = where
        self.rates = np.array([j.rate for j in jumps])
        self.rows, self.rng = rows, rng
        self.pending = 0.0  # dephasing time not yet kicked (kicks commute with diagonal steps)

    def flush(self, states):
        """Apply the pending kick (before a measurement, a record or the end)."""
        if self.pending > 0:
            duration, self.pending = self.pending, 0.0
            return list(self.apply(np.stack(states), duration))  # one draw per shot, for every branch
        return states

    def apply(self, states: np.ndarray, duration: float) -> np.ndarray:
        """Kick (branches, rows, D) kets: e^{−iΣφ n} with φ ~ N(0, rate·duration) per shot and jump."""
        phi = np.sqrt(self.rates * duration) * self.rng.standard_normal((self.rows, len(self.rates)))
        single = np.ones((self.rows, len(self.rates) + 1), dtype=complex)
        single[:, :-1] = np.exp(-1j * phi)
        factors = single[:, self.gather[:, 0]]
        for k in range(1, self.gather.shape[1]):
            factors = factors * single[:, self.gather[:, k]]
        states *= factors[None]
        return states

    def substeps(self, couplings: np.ndarray, dt: float) -> int:
        """Sub-steps of a driven segment so that Ω·dt stays below KICK_ANGLE."""
        omega = np.abs(couplings[..., 0]).max(initial=0.0)
        return max(1, math.ceil(omega * dt / KICK_ANGLE))


def _run(basis, shots, jumps, density, image_loss, record_history, kicks=None) -> Run:
    stepper = _Stepper(basis, shots, jumps, density, kicks)
    kets = np.stack([basis.state(levels) for levels in shots.initial])
    states = [np.einsum("bi,bj->bij", kets, kets.conj()) if density else kets]
    outcomes: list[tuple] = [()]
    history: list[tuple[float, np.ndarray]] = []
    segments = shots.model.segments
    images = 0
    for k, segment in enumerate(segments):
        if segment.image is not None:
            states = stepper.close(states)
            if kicks is not None:
                states = kicks.flush(states)
            draws = shots.image_draws[images] if shots.image_draws else None
            outcomes, states = _image(basis, shots.model, k, outcomes, states, density, image_loss or {}, draws)
            images += 1
            if record_history:
                history.append((segment.start_s, _populations(basis, states, density)))
        elif segment.duration_s > 0:
            for t0, dt in _pieces(segment, record_history):
                states = stepper.step(k, t0, dt, states)
                if record_history:
                    states = stepper.close(states)
                    if kicks is not None:
                        states = kicks.flush(states)
                    history.append((t0 + dt, _populations(basis, states, density)))
    states = stepper.close(states)
    if kicks is not None:
        states = kicks.flush(states)
    return Run(outcomes, states, history)


def _pieces(segment: Segment, fine: bool) -> list[tuple[float, float]]:
    if not fine or not segment.couplings:
        return [(segment.start_s, segment.duration_s)]
    step = segment.duration_s / HISTORY_STEPS
    return [(segment.start_s + i * step, step) for i in range(HISTORY_STEPS)]


class _Stepper:
    """Builds the batched generator of a segment and applies its exponential."""

    def __init__(self, basis: Basis, shots: Shots, jumps: list[Jump], density: bool, kicks: _Kicks | None = None):
        self.basis, self.shots, self.density, self.kicks = basis, shots, density, kicks
        self.frame: np.ndarray | None = None  # the drive frame the states are in (None: the atom frame)
        self.now = 0.0
        self.loss_diag = np.zeros(basis.size)
        for j in jumps:
            self.loss_diag += j.rate * basis.mask(j.site, j.source)
        # Density matrices keep |x⟩ for sites that can be lost, so every jump lands in the basis.
        self.returning = [(basis.transition(j.site, j.source, j.target), j.rate) for j in jumps
                          if j.target != LOST or density]
        self.pair_masks = {}
        self.block_cache: dict[tuple, list[np.ndarray]] = {}
        self.label_cache: dict[tuple, np.ndarray] = {}
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
        return sh.model.segments[k], sh.couplings[k], sh.shifts[k], sh.shift_levels[k], sh.pairs, sh.interactions_at(k)

    def diagonal(self, seg: Segment, couplings, shifts, levels, pairs, interactions):
        """(diagonal of H_eff, drive frame), rad/s, with as many rows as the widest parameter."""
        b = self.basis
        rows = max(couplings.shape[0], shifts.shape[0], interactions.shape[0])
        frame = np.zeros((rows, b.size))
        if seg.couplings:  # one matrix product per kind of term: (rows, terms) @ (terms, D) masks
            upper = np.array([b.mask(c.site, c.upper) for c in seg.couplings], dtype=float)
            frame -= couplings[:, :, 1] @ upper
        real = frame.copy()
        imag = np.broadcast_to(-0.5 * self.loss_diag, (rows, b.size)).copy()
        if levels:
            masks = np.array([b.mask(site, level) for site, level in levels], dtype=float)
            real += shifts[:, :, 0] @ masks
            imag -= 0.5 * (shifts[:, :, 1] @ masks)
        if pairs:
            real += interactions @ np.array([self._pair_mask(p) for p in pairs], dtype=float)
        return real + 1j * imag, frame

    def step(self, k: int, t0: float, dt: float, states: list[np.ndarray]) -> list[np.ndarray]:
        seg, couplings, shifts, levels, pairs, interactions = self.parameters(k)
        diag, frame = self.diagonal(seg, couplings, shifts, levels, pairs, interactions)
        couplings = np.broadcast_to(couplings, (diag.shape[0],) + couplings.shape[1:])
        stacked = np.stack(states)  # (K, B, D) or (K, B, D, D)
        stacked = self._enter(stacked, frame, t0)
        if not seg.couplings and not self.returning:
            stacked = self._diagonal_step(stacked, diag, dt)
            if self.kicks is not None:  # kicks commute with a diagonal step: kick it with the next one
                self.kicks.pending += dt
        elif self.density:
            stacked = self._lindblad_step(seg, couplings, diag, dt, stacked, shifts, levels)
        elif self._separable(seg):
            stacked = self._rotations_step(seg, couplings, diag, dt, stacked, shifts, levels)
            if self.kicks is not None:  # no coupling moves a dephased level: the kicks commute
                self.kicks.pending += dt
        elif self.kicks is not None:  # symmetric splitting: half kicks at both ends, full ones between
            n = self.kicks.substeps(couplings, dt)
            stacked = self.kicks.apply(stacked, self.kicks.pending + dt / (2 * n))
            self.kicks.pending = 0.0
            done = [0]

            def kick(states):  # the last half kick waits for the next step (or a flush)
                done[0] += 1
                if done[0] < n:
                    return self.kicks.apply(states, dt / n)
                self.kicks.pending = dt / (2 * n)
                return states
            stacked = self._ket_step(seg, couplings, diag, dt / n, stacked, n, kick)
        else:
            stacked = self._ket_step(seg, couplings, diag, dt, stacked)
        self.now = t0 + dt  # left in the drive frame: the next step with the same frame skips two rotations
        return list(stacked)

    def _enter(self, stacked: np.ndarray, frame: np.ndarray, t0: float) -> np.ndarray:
        """Map the states into the drive frame of a step starting at t0, leaving the open one."""
        if self.frame is not None and self.frame.shape == frame.shape and np.array_equal(self.frame, frame):
            return stacked
        stacked = self._leave(stacked, t0)
        if frame.any():
            stacked = _rotate(stacked, np.exp(-1j * frame * t0), self.density)
            self.frame = frame
        return stacked

    def _leave(self, stacked: np.ndarray, t: float) -> np.ndarray:
        if self.frame is not None:
            stacked = _rotate(stacked, np.exp(1j * self.frame * t), self.density)
            self.frame = None
        return stacked

    def close(self, states: list[np.ndarray]) -> list[np.ndarray]:
        """The states back in the atom frame (before a measurement, a record or the end)."""
        if self.frame is None:
            return states
        return list(self._leave(np.stack(states), self.now))

    def _separable(self, seg: Segment) -> bool:
        """Qubit rotations only (0↔1, one coupling per site): then every block's H_eff is a sum
        of single-site terms plus a constant (atoms in |r⟩ or |x⟩ are spectators, and the pair
        shifts act on |rr⟩ only), so its propagator is a product of 2×2 rotations."""
        sites = [c.site for c in seg.couplings]
        return (len(sites) > 1 and len(set(sites)) == len(sites)
                and all((c.lower, c.upper) == (0, 1) for c in seg.couplings))

    def _rotations_step(self, seg, couplings, diag, dt, stacked, shifts, levels) -> np.ndarray:
        """e^{−iH·dt} as e^{−i·rest·dt} times one 2×2 rotation per driven site (they commute)."""
        b, rows = self.basis, diag.shape[0]
        rest = diag.copy()
        singles = []
        for j, c in enumerate(seg.couplings):
            h = np.zeros((rows, 2, 2), dtype=complex)
            for k, (site, level) in enumerate(levels):
                if site == c.site and level in (0, 1):
                    h[:, level, level] += np.broadcast_to(shifts[:, k, 0] - 0.5j * shifts[:, k, 1], (rows,))
            h[:, 1, 1] -= couplings[:, j, 1]
            value = 0.5 * couplings[:, j, 0] * np.exp(1j * couplings[:, j, 2])
            h[:, 1, 0], h[:, 0, 1] = value, np.conj(value)
            for level in (0, 1):
                rest -= h[:, level, level][:, None] * b.mask(c.site, level)
            singles.append((self._transition(c.site, 0, 1), _expm2(-1j * dt * h)))
        out = stacked * np.exp(-1j * rest * dt)[None]
        for (lower, upper), u in singles:
            a, z = out[..., lower], out[..., upper]  # u: (rows, 2, 2); states (branches, rows, D)
            out[..., lower] = u[None, :, 0, 0, None] * a + u[None, :, 0, 1, None] * z
            out[..., upper] = u[None, :, 1, 0, None] * a + u[None, :, 1, 1, None] * z
        return out

    def _diagonal_step(self, stacked: np.ndarray, diag: np.ndarray, dt: float) -> np.ndarray:
        phase = np.exp(-1j * diag * dt)[None]  # (1, rows, D)
        if not self.density:
            return stacked * phase
        return stacked * phase[..., :, None] * phase.conj()[..., None, :]

    def _ket_step(self, seg, couplings, diag, dt, stacked, repeats: int = 1, kick=None):
        """e^{−iH_eff·dt} on every block, `repeats` times; after each, `kick(states)` (the
        dephasing kicks, diagonal, applied to the whole state)."""
        occupied = np.any(stacked != 0, axis=(0, 1))
        rows = diag.shape[0]
        dense, sparse = [], []
        for idx in self.blocks(seg):
            idx = idx[occupied[idx].any(axis=1)]  # blocks holding no amplitude stay empty
            if not len(idx):
                continue
            if idx.shape[1] > DENSE_LIMIT or self._sparse_is_cheaper(seg, couplings, diag, dt, idx, stacked.shape[0]):
                sparse += list(idx)
                continue
            for lo, hi in _chunks(rows, idx.shape[1], idx.shape[0]):
                u = batched_expm(-1j * dt * self.block_hamiltonian(seg, couplings[lo:hi], diag[lo:hi], idx))
                dense.append((idx, lo, hi, u))
        for _ in range(repeats):
            out = np.zeros_like(stacked)
            for idx, lo, hi, u in dense:
                if rows > 1:  # u: (rows, blocks, k, k); states: (branches, rows, D)
                    out[:, lo:hi, idx] = np.einsum("rmij,krmj->krmi", u, stacked[:, lo:hi][..., idx])
                else:
                    out[..., idx] = np.einsum("mij,krmj->krmi", u[0], stacked[..., idx])
            for block in sparse:
                out[..., block] = self._sparse_block_step(seg, couplings, diag, dt, stacked[..., block], block)
            stacked = out if kick is None else kick(out)
        return stacked

    def _sparse_is_cheaper(self, seg, couplings, diag, dt, idx, branches) -> bool:
        """Compare flop estimates: scaling and squaring (~k³ per squaring) against the
        exponential action of the sparse block (~nnz per matrix-vector product, about
        one product per unit of ‖H·dt‖ plus a fixed overhead; Al-Mohy & Higham 2011)."""
        k = idx.shape[1]
        if k < SPARSE_MIN:
            return False
        norm = dt * (np.abs(diag[:, idx.ravel()]).max() + 0.5 * np.abs(couplings[..., 0]).sum(axis=-1).max())
        dense = 2 * k**3 * (14 + max(0.0, math.log2(max(norm, 1e-300))))
        sparse = k * (len(seg.couplings) + 1) * (norm + 40) * 8 * branches
        return sparse < dense

    def _sparse_block_step(self, seg, couplings, diag, dt, part, block) -> np.ndarray:
        """One large block: the exponential action of its sparse H_eff (Al-Mohy & Higham 2011)."""
        rows, k = diag.shape[0], len(block)
        out = np.empty_like(part)
        for r in range(rows):
            gen = -1j * dt * self.sparse_block_hamiltonian(seg, couplings, diag, block, r)
            chosen = part if rows == 1 else part[:, r:r + 1]
            result = expm_multiply(gen, chosen.reshape(-1, k).T).T.reshape(chosen.shape)
            if rows == 1:
                return result
            out[:, r:r + 1] = result
        return out

    def sparse_block_hamiltonian(self, seg: Segment, couplings, diag: np.ndarray, block: np.ndarray,
                                 row: int) -> sp.csr_matrix:
        k = len(block)
        where = np.full(self.basis.size, -1)
        where[block] = np.arange(k)
        parts_r, parts_c, parts_v = [np.arange(k)], [np.arange(k)], [diag[row, block]]
        for j, c in enumerate(seg.couplings):
            lower, upper = self._transition(c.site, c.lower, c.upper)
            lo, up = where[lower], where[upper]
            inside = lo >= 0
            value = 0.5 * couplings[row, j, 0] * np.exp(1j * couplings[row, j, 2])
            parts_r += [up[inside], lo[inside]]
            parts_c += [lo[inside], up[inside]]
            parts_v += [np.full(inside.sum(), value), np.full(inside.sum(), np.conj(value))]
        return sp.csr_matrix((np.concatenate(parts_v), (np.concatenate(parts_r), np.concatenate(parts_c))),
                             shape=(k, k))

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
            self.label_cache[key] = labels
        return self.block_cache[key]

    def labels(self, seg: Segment) -> np.ndarray:
        """Block number of every state under the segment's couplings."""
        self.blocks(seg)
        return self.label_cache[tuple((c.site, c.lower, c.upper) for c in seg.couplings)]

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
        """Density matrices: the Lindblad generator, restricted to groups of elements ρ_ab.

        With a, b in blocks A, B of the segment's couplings, H keeps ρ_ab inside A×B;
        jumps link A×B to the blocks of their targets. Each linked group of block
        pairs is exponentiated on its own, and only groups holding population.
        """
        rows, d = diag.shape[0], self.basis.size
        labels = self.labels(seg)
        jumps = self._segment_jumps(shifts, levels, rows)
        occupied = np.any(stacked != 0, axis=(0, 1))
        out = np.zeros_like(stacked)
        flat = stacked.reshape(stacked.shape[:2] + (d * d,))
        target = out.reshape(flat.shape)
        for group in _pair_groups(labels, jumps, occupied):
            elements, pairs = _group_elements(labels, group, d)
            if len(elements) > MAX_LINDBLAD_BLOCK:
                from .limits import SimulationLimit
                raise SimulationLimit(f"the Lindblad engine would need a block of {len(elements):,} density-matrix "
                                      f"elements (limit {MAX_LINDBLAD_BLOCK:,}); what would help: the trajectories "
                                      "engine (pure dephasing) or the fast engine (loss only), or fewer atoms "
                                      "within one blockade radius")
            for lo, hi in _chunks(rows, len(elements)):
                whole = np.arange(self.basis.size)[None]  # all states as one block: the dense H_eff
                h = self.block_hamiltonian(seg, couplings[lo:hi], diag[lo:hi], whole)[:, 0]
                u = batched_expm(_group_generator(h, pairs, elements, jumps, d, lo, hi) * dt)
                if rows > 1:
                    target[:, lo:hi, elements] = np.einsum("rij,krj->kri", u, flat[:, lo:hi][..., elements])
                else:
                    target[..., elements] = np.einsum("ij,krj->kri", u[0], flat[..., elements])
        return out

    def _segment_jumps(self, shifts, levels, rows) -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
        """(sources, targets, rate per shot row) of every jump acting in the segment."""
        out = [(src, tgt, np.full(rows, rate)) for (src, tgt), rate in self.returning]
        for j, (site, level) in enumerate(levels):
            rate = np.broadcast_to(shifts[:, j, 1], (rows,))
            if np.any(rate > 0):
                src, tgt = self._transition(site, level, LOST)
                out.append((src, tgt, rate))
        return out


def _pair_groups(labels: np.ndarray, jumps, occupied: np.ndarray) -> list[list[tuple[int, int]]]:
    """Groups of block pairs (A, B) linked by jumps, keeping those that hold any ρ_ab ≠ 0."""
    count = int(labels.max()) + 1
    parent = list(range(count * count))

    def root(x: int) -> int:
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x
    for src, tgt, _ in jumps:
        a = (labels[src][:, None] * count + labels[src][None, :]).ravel()
        b = (labels[tgt][:, None] * count + labels[tgt][None, :]).ravel()
        for x, y in set(zip(a.tolist(), b.tolist())):
            parent[root(x)] = root(y)
    rows, cols = np.nonzero(occupied)
    held = {root(x) for x in set((labels[rows] * count + labels[cols]).tolist())}
    groups: dict[int, list[tuple[int, int]]] = {}
    for x in range(count * count):
        r = root(x)
        if r in held:
            groups.setdefault(r, []).append(divmod(x, count))
    return list(groups.values())


def _group_elements(labels: np.ndarray, group, d: int) -> tuple[np.ndarray, list]:
    """Flat indices a·D + b of the group's elements, and per pair (A states, B states, offset)."""
    order = np.argsort(labels, kind="stable")
    starts = np.concatenate([[0], np.cumsum(np.bincount(labels))])
    elements, pairs, offset = [], [], 0
    for a, b in group:
        sa, sb = order[starts[a]:starts[a + 1]], order[starts[b]:starts[b + 1]]
        elements.append((sa[:, None] * d + sb[None, :]).ravel())
        pairs.append((sa, sb, offset))
        offset += len(sa) * len(sb)
    return np.concatenate(elements), pairs


def _group_generator(h, pairs, elements, jumps, d, lo, hi) -> np.ndarray:
    """The Lindblad generator on one group of elements, per shot row: −i[H_eff, ·] plus jumps."""
    k = len(elements)
    gen = np.zeros((h.shape[0], k, k), dtype=complex)
    for sa, sb, offset in pairs:
        p, q = len(sa), len(sb)
        ha, hb = h[:, sa][:, :, sa], h[:, sb][:, :, sb]
        block = -1j * np.einsum("rij,kl->rikjl", ha, np.eye(q)) + 1j * np.einsum("ij,rkl->rikjl", np.eye(p), hb.conj())
        gen[:, offset:offset + p * q, offset:offset + p * q] = block.reshape(-1, p * q, p * q)
    where = np.full(d * d, -1)
    where[elements] = np.arange(k)
    for src, tgt, rate in jumps:
        to = where[(tgt[:, None] * d + tgt[None, :]).ravel()]
        frm = where[(src[:, None] * d + src[None, :]).ravel()]
        inside = (to >= 0) & (frm >= 0)
        rates = rate[lo:hi]
        gen[:, to[inside], frm[inside]] += rates[:, None]
    return gen


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
    if shape[-1] == 2:
        return _expm2(a)
    m = a.reshape(-1, shape[-2], shape[-1])
    if WORKERS > 1 and m.shape[0] * shape[-1] ** 3 >= PARALLEL_WORK:
        with ThreadPoolExecutor(WORKERS) as pool:  # numpy's batched kernels release the GIL
            return np.concatenate(list(pool.map(_expm_stack, np.array_split(m, WORKERS)))).reshape(shape)
    return _expm_stack(m).reshape(shape)


def _expm2(a: np.ndarray) -> np.ndarray:
    """exp of 2×2 matrices in closed form: with A = τI + B, B traceless and s² = −det B,
    e^A = ½[(e^{τ+s} + e^{τ−s}) I + (e^{τ+s} − e^{τ−s}) B/s] (Cayley–Hamilton). Exact at any
    norm: a long pulse stays a contraction, where repeated squaring would amplify rounding."""
    tau = 0.5 * (a[..., 0, 0] + a[..., 1, 1])
    b00 = a[..., 0, 0] - tau
    s = np.sqrt(b00 * b00 + a[..., 0, 1] * a[..., 1, 0])
    plus, minus = np.exp(tau + s), np.exp(tau - s)
    small = np.abs(s) < 1e-6
    safe = np.where(small, 1.0, s)
    ratio = np.where(small, 2 * np.exp(tau) * (1 + s * s / 6), (plus - minus) / safe)  # (e^{τ+s} − e^{τ−s})/s
    even = 0.5 * (plus + minus)
    out = np.empty(a.shape, dtype=complex)
    out[..., 0, 0] = even + 0.5 * ratio * b00
    out[..., 1, 1] = even - 0.5 * ratio * b00
    out[..., 0, 1] = 0.5 * ratio * a[..., 0, 1]
    out[..., 1, 0] = 0.5 * ratio * a[..., 1, 0]
    return out


def _expm_eig(m: np.ndarray) -> np.ndarray:
    """exp of matrices of very large norm from their eigendecomposition: unitary to rounding
    for anti-Hermitian ones (−iH·t), and a contraction for −iH_eff·t, whose eigenvalues have
    non-positive real parts. No error grows with the norm, unlike repeated squaring."""
    out = np.empty_like(m)
    hermitian = np.all(np.abs(m + np.conj(np.swapaxes(m, -1, -2))) <= 1e-12 * np.abs(m).max(axis=(-1, -2),
                                                                                             keepdims=True),
                       axis=(-1, -2))
    if hermitian.any():
        values, vectors = np.linalg.eigh(1j * m[hermitian])
        out[hermitian] = (vectors * np.exp(-1j * values)[..., None, :]) @ np.conj(np.swapaxes(vectors, -1, -2))
    if (~hermitian).any():
        values, vectors = np.linalg.eig(m[~hermitian])
        out[~hermitian] = np.linalg.solve(np.swapaxes(vectors, -1, -2),
                                          np.swapaxes(vectors * np.exp(values)[..., None, :], -1, -2)
                                          ).swapaxes(-1, -2)
    return out


def _expm_stack(m: np.ndarray) -> np.ndarray:
    shape = m.shape
    norms = np.abs(m).sum(axis=1).max(axis=1)
    squarings = np.maximum(0, np.ceil(np.log2(np.maximum(norms, 1e-300) / _THETA13))).astype(int)
    long = squarings > MAX_SQUARINGS
    if long.any():
        out = np.empty_like(m)
        out[long] = _expm_eig(m[long])
        if (~long).any():
            out[~long] = _expm_stack(m[~long])
        return out
    m = m / (2.0 ** squarings)[:, None, None]
    b = _PADE13
    eye = np.eye(shape[-1])
    m2 = m @ m
    m4 = m2 @ m2
    m6 = m4 @ m2
    u = m @ (m6 @ (b[13] * m6 + b[11] * m4 + b[9] * m2) + b[7] * m6 + b[5] * m4 + b[3] * m2 + b[1] * eye)
    v = m6 @ (b[12] * m6 + b[10] * m4 + b[8] * m2) + b[6] * m6 + b[4] * m4 + b[2] * m2 + b[0] * eye
    r = np.linalg.solve(v - u, v + u)
    for step in range(int(squarings.max(initial=0))):
        more = squarings > step
        r[more] = r[more] @ r[more]
    return r


_BLAS = None


def single_threaded_blas():
    """BLAS limited to one thread: stacks of small matrices run much faster so (the
    engine shares big stacks between cores itself)."""
    global _BLAS
    if _BLAS is None:
        _BLAS = ThreadpoolController()
    return _BLAS.limit(limits=1)


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
            if norms(projected, density).max() <= MIN_WEIGHT:
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


def _populations(basis: Basis, states: list[np.ndarray], density: bool) -> np.ndarray:
    return site_populations(basis, sum(probabilities(s, density).mean(axis=0) for s in states))


def blockade_truncation(model: Model, tolerance: float) -> tuple[tuple[tuple[int, int], ...], float]:
    """Pairs whose |rr⟩ can be dropped, and an estimate of the error that makes.

    A pair driven from its singly excited states couples to |rr⟩ with √2·Ω/2 and
    is detuned by V: |rr⟩ never holds more than 2Ω²/(2Ω² + V²) ≤ 2Ω²/V², and the
    singly excited states shift by ~Ω²/2V, a phase Ω²T/2V over the time T the
    Rydberg drives play (second-order perturbation theory, derived). Pairs are
    dropped from the most strongly shifted down while (Σ phases)² + Σ populations,
    the estimated infidelity, stays within `tolerance`.
    """
    rydberg = [seg for seg in model.segments if any(RYD in (c.lower, c.upper) for c in seg.couplings)]
    omega = max((abs(c.omega) for seg in rydberg for c in seg.couplings if RYD in (c.lower, c.upper)), default=0.0)
    drive_time = sum(seg.duration_s for seg in rydberg)
    pairs, phase, population = [], 0.0, 0.0
    for pair, v in sorted(model.interactions.items(), key=lambda kv: -abs(kv[1])):
        if not v:
            break
        more_phase, more_population = omega**2 * drive_time / (2 * abs(v)), 2 * omega**2 / v**2
        if (phase + more_phase) ** 2 + population + more_population > tolerance:
            break
        pairs.append(pair)
        phase, population = phase + more_phase, population + more_population
    return tuple(sorted(pairs)), (phase**2 + population if pairs else 0.0)


__all__ = ["Run", "batched_expm", "blockade_truncation", "needs_lindblad", "run"]
