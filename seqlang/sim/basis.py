"""The product states a cluster is simulated in, and what is read out of them.

The full model gives every atom the levels 0, 1, r, x (and e in ladder mode).
Most of those states are never reached: an atom no Rydberg drive touches stays
in {0, 1}; an atom that cannot be lost by a sampled event needs no |x⟩ (decay
to the loss level is carried as lost norm); and when two atoms shift each
other's doubly excited state far above every drive, |rr⟩ of that pair is
dropped (blockade truncation). A basis is the list of the product states kept,
as levels per site, in the order of the full space (site 0 most significant).
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np

from .model import DIM, LOST, RYD


@dataclass(frozen=True)
class Basis:
    """Kept product states: `levels[k, i]` is the level of site i in state k."""

    levels: np.ndarray
    base: int = DIM  # levels per atom in the full model
    truncated_pairs: tuple[tuple[int, int], ...] = ()
    neglected_bound: float = 0.0  # upper bound on the dropped |rr⟩ population
    keys: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        object.__setattr__(self, "keys", self.key_of(self.levels))

    @property
    def size(self) -> int:
        return self.levels.shape[0]

    @property
    def sites(self) -> int:
        return self.levels.shape[1]

    def key_of(self, levels: np.ndarray) -> np.ndarray:
        """Index of product states in the full space (site 0 most significant)."""
        weights = self.base ** np.arange(self.sites - 1, -1, -1, dtype=np.int64)
        return levels.astype(np.int64) @ weights

    def find(self, keys: np.ndarray) -> np.ndarray:
        """Position of each full-space key in this basis, −1 where it was not kept."""
        at = np.searchsorted(self.keys, keys)
        at = np.minimum(at, self.size - 1)
        return np.where(self.keys[at] == keys, at, -1)

    def mask(self, site: int, level: int) -> np.ndarray:
        return self.levels[:, site] == level

    def transition(self, site: int, lower: int, upper: int) -> tuple[np.ndarray, np.ndarray]:
        """(lower-state rows, upper-state rows) of the kept states that `site` flips between."""
        rows = np.nonzero(self.mask(site, lower))[0]
        stride = self.base ** (self.sites - 1 - site)
        partners = self.find(self.keys[rows] + (upper - lower) * stride)
        kept = partners >= 0
        return rows[kept], partners[kept]

    def state(self, levels: tuple[int, ...]) -> np.ndarray:
        """The ket of one product state."""
        psi = np.zeros(self.size, dtype=complex)
        at = self.find(self.key_of(np.array([levels])))[0]
        if at < 0:
            raise ValueError(f"product state {levels} is not in the simulated basis")
        psi[at] = 1.0
        return psi


def full_basis(size: int, base: int = DIM) -> Basis:
    """Every product state of `size` atoms with `base` levels each."""
    levels = np.array(list(itertools.product(range(base), repeat=size)), dtype=np.int8).reshape(-1, size)
    return Basis(levels, base)


def reduced_basis(allowed: list[tuple[int, ...]], base: int = DIM,
                  truncated_pairs: tuple[tuple[int, int], ...] = (), neglected_bound: float = 0.0,
                  limit: int | None = None, on_limit=None) -> Basis:
    """Products of each site's `allowed` levels, without |rr⟩ on the truncated pairs.

    Built site by site, dropping forbidden |rr⟩ as soon as both sites are placed, so the
    full product is never materialised. Every site allows |0⟩ and |1⟩, so the count can
    only grow as sites are added: past `limit`, ``on_limit(count, placed)`` is raised
    before anything larger is allocated.
    """
    partners: dict[int, list[int]] = {}
    for i, j in truncated_pairs:
        partners.setdefault(max(i, j), []).append(min(i, j))
    levels = np.zeros((1, 0), dtype=np.int8)
    for site, options in enumerate(allowed):
        options = np.array(sorted(options), dtype=np.int8)
        grown = np.empty((levels.shape[0] * len(options), site + 1), dtype=np.int8)
        grown[:, :site] = np.repeat(levels, len(options), axis=0)
        grown[:, site] = np.tile(options, levels.shape[0])
        for other in partners.get(site, ()):
            grown = grown[~((grown[:, site] == RYD) & (grown[:, other] == RYD))]
        levels = grown
        if limit is not None and levels.shape[0] > limit:
            raise on_limit(levels.shape[0], site + 1)
    return Basis(levels, base, tuple(truncated_pairs), neglected_bound)


def probabilities(states: np.ndarray, density: bool) -> np.ndarray:
    """Probability of each kept state: |ψ_k|² of kets (..., D), or ρ_kk of density matrices (..., D, D)."""
    return np.real(np.diagonal(states, axis1=-2, axis2=-1)) if density else np.abs(states) ** 2


def norms(states: np.ndarray, density: bool) -> np.ndarray:
    """Norm of each ket, trace of each density matrix (the probability not lost)."""
    return probabilities(states, density).sum(axis=-1)


def site_populations(basis: Basis, probs: np.ndarray, dim: int = DIM) -> np.ndarray:
    """populations[site, level] from the probability of each kept state.

    Norm missing from `probs` (lost to decay or scattering in the fast engine) is
    counted in |x⟩ of every atom: such a shot is lost for the whole cluster.
    """
    out = np.zeros((basis.sites, dim))
    for site in range(basis.sites):
        out[site] = np.bincount(basis.levels[:, site], weights=probs, minlength=basis.base)[:dim]
    out[:, LOST] += max(0.0, 1.0 - float(probs.sum()))
    return out


def _split(basis: Basis, keep: list[int], dim: int) -> tuple[np.ndarray, np.ndarray, int]:
    """Row index of the kept sites' state (in dim^len(keep)) and of the rest, per basis state."""
    rest = [i for i in range(basis.sites) if i not in keep]
    kept = np.minimum(basis.levels[:, keep], dim - 1)  # rows with a level ≥ dim are masked out later
    inner = np.ravel_multi_index(kept.T, [dim] * len(keep)) if keep else np.zeros(basis.size, int)
    if rest:
        _, outer = np.unique(basis.levels[:, rest], axis=0, return_inverse=True)
        outer = outer.ravel()
    else:
        outer = np.zeros(basis.size, dtype=int)
    return inner, outer, int(outer.max()) + 1


def _inside(basis: Basis, keep: list[int], dim: int) -> np.ndarray:
    """States whose kept sites lie in the first `dim` levels and with no atom in the
    ladder's intermediate level (what is left there leaves the reported numbers)."""
    return (basis.levels[:, keep] < dim).all(axis=1) & (basis.levels < DIM).all(axis=1)


def partial_trace_kets(basis: Basis, kets: np.ndarray, keep: list[int], dim: int = DIM) -> np.ndarray:
    """Σ over kets of Tr_rest |ψ⟩⟨ψ| on the `keep` sites (levels ≥ dim must be empty)."""
    inner, outer, count = _split(basis, keep, dim)
    inside = _inside(basis, keep, dim)
    kets = kets.reshape(-1, basis.size)
    rho = np.zeros((dim ** len(keep),) * 2, dtype=complex)
    for lo in range(0, kets.shape[0], 256):  # Σ_k B_k B_k† as one product per batch of kets
        part = kets[lo:lo + 256]
        block = np.zeros((dim ** len(keep), part.shape[0], count), dtype=complex)
        block[inner[inside], :, outer[inside]] = part[:, inside].T
        flat = block.reshape(dim ** len(keep), -1)
        rho += flat @ flat.conj().T
    return rho


def partial_trace_density(basis: Basis, rhos: np.ndarray, keep: list[int], dim: int = DIM) -> np.ndarray:
    """Σ over density matrices of Tr_rest ρ on the `keep` sites."""
    inner, outer, count = _split(basis, keep, dim)
    inside = _inside(basis, keep, dim)
    total = rhos.reshape(-1, basis.size, basis.size).sum(axis=0)
    rho = np.zeros((dim ** len(keep),) * 2, dtype=complex)
    for r in range(count):
        rows = np.nonzero((outer == r) & inside)[0]
        rho[np.ix_(inner[rows], inner[rows])] += total[np.ix_(rows, rows)]
    return rho


__all__ = ["Basis", "full_basis", "norms", "partial_trace_density", "partial_trace_kets", "probabilities",
           "reduced_basis", "site_populations"]
