"""Monte Carlo error bars of sampled results, combined over clusters.

Every reported number is a function of the shot-averaged states of independent
clusters, F = f(ρ̄₁, ρ̄₂, …). Its standard error follows from the linearisation
(delta method, textbook): shot k of cluster c moves F by δ_ck = f(…, ρ_ck, …) − F
with the other clusters at their means. Clusters simulated by one representative
reuse the same shots, so their δ are summed per representative before the
variance is taken: Var F = Σ_rep Var_k(Σ_c δ_ck) / N_rep. Exact (unsampled)
clusters contribute nothing, and a number with no sampled part has no error bar.
"""
from __future__ import annotations

import math

import numpy as np

from .basis import _inside, _split, norms, probabilities
from .model import LOST

BATCH_ELEMENTS = 2**21  # matrix elements of per-shot blocks held at once
MAX_ERROR_SITES = 8  # expectations over more sites carry no per-shot error bars (2^16 elements per shot)


def shot_blocks(cluster, keep: list[int], lo: int, hi: int, dim: int = 2, factors=None) -> np.ndarray:
    """(hi−lo, d, d) reduced density matrices of sites `keep` for each shot (branches summed,
    each weighted by its factor when given; with ``dim=2`` the qubit block)."""
    basis = cluster.basis
    inner, outer, count = _split(basis, keep, dim)
    inside = _inside(basis, keep, dim)
    size = dim ** len(keep)
    out = np.zeros((hi - lo, size, size), dtype=complex)
    for factor, state in zip(factors if factors is not None else [1.0] * len(cluster.states), cluster.states):
        if factor == 0:
            continue
        part = state[lo:hi]
        if cluster.is_density:
            for r in range(count):
                rows = np.nonzero((outer == r) & inside)[0]
                out[:, inner[rows][:, None], inner[rows][None, :]] += factor * part[:, rows][:, :, rows]
        else:
            block = np.zeros((hi - lo, size, count), dtype=complex)
            block[:, inner[inside], outer[inside]] = part[:, inside]
            out += factor * np.einsum("sic,sjc->sij", block, block.conj())
    return out


def shot_probabilities(cluster) -> np.ndarray:
    """(shots, D) probability of each kept state per shot, branches summed."""
    return sum(probabilities(s, cluster.is_density) for s in cluster.states)


def shot_level_probability(cluster, keep: list[int], level: int) -> np.ndarray:
    """(shots,) probability that one of `keep` is in `level` (lost norm counts as LOST)."""
    probs = shot_probabilities(cluster)
    hit = probs[:, (cluster.basis.levels[:, keep] == level).any(axis=1)].sum(axis=1)
    if level == LOST:
        hit = hit + np.maximum(0.0, 1.0 - probs.sum(axis=1))
    return hit


def standard_error(deviations: dict) -> np.ndarray | None:
    """√(Σ_rep Var(Σ δ)/N) from {representative: (shots, m) summed deviations}; None if empty."""
    total = None
    for h in deviations.values():
        if h.shape[0] < 2:
            continue
        var = np.var(h, axis=0, ddof=1) / h.shape[0]
        total = var if total is None else total + var
    return None if total is None else np.sqrt(total)


def product_errors(parts, functional, reorder) -> np.ndarray | None:
    """Errors of `functional` (blocks (S, d, d) → (S, m)) on the product of the parts' blocks.

    `parts`: (cluster, keep, representative, sampled, mean block) in product order;
    `reorder` maps a product block (S, d, d) to the expectation's site order.
    """
    means = [p[4][None] for p in parts]
    centre = functional(reorder(_kron_all(means)))[0]
    deviations: dict = {}
    for k, (cluster, keep, rep, sampled, _) in enumerate(parts):
        if not sampled:
            continue
        shots = cluster.shots
        h = np.empty((shots, centre.shape[0]))
        batch = max(1, BATCH_ELEMENTS // centre.shape[0] // max(p[4].size for p in parts) // 4)
        for lo in range(0, shots, batch):
            hi = min(shots, lo + batch)
            blocks = means[:k] + [shot_blocks(cluster, keep, lo, hi)] + means[k + 1:]
            h[lo:hi] = functional(reorder(_kron_all(blocks))) - centre
        deviations[rep] = deviations[rep] + h if rep in deviations else h
    return standard_error(deviations)


def ratio_errors(cluster, keep: list[int], factors, functional, reorder) -> np.ndarray | None:
    """Errors of a conditioned number F = Σ_k f(B_k) / Σ_k t_k (ratio estimator, delta method):
    B_k is shot k's qubit block of sites `keep` with the branches weighted by `factors` (the
    outcome's likelihood), t_k its weight (the trace over all levels), f linear."""
    shots = cluster.shots
    weights = sum(f * norms(s, cluster.is_density) for f, s in zip(factors, cluster.states) if f)
    if shots < 2 or not isinstance(weights, np.ndarray) or weights.mean() <= 0:
        return None
    size = 2 ** len(keep)
    batch = max(1, BATCH_ELEMENTS // (size * size))
    values = np.concatenate([functional(reorder(shot_blocks(cluster, keep, lo, min(shots, lo + batch),
                                                            factors=factors)))
                             for lo in range(0, shots, batch)])
    ratio = values.mean(axis=0) / weights.mean()
    deviations = (values - ratio[None, :] * weights[:, None]) / weights.mean()
    return np.std(deviations, axis=0, ddof=1) / math.sqrt(shots)


def any_level_error(parts, level: int) -> float | None:
    """Error of P(one of the sites in `level`) = 1 − Π_c(1 − p_c) over independent clusters."""
    means = {id(p[0]): p[0].level_probability(p[1], level) for p in parts}
    deviations: dict = {}
    for cluster, keep, rep, sampled, _ in parts:
        if not sampled:
            continue
        others = math.prod(1 - v for key, v in means.items() if key != id(cluster))
        h = (others * (shot_level_probability(cluster, keep, level) - means[id(cluster)]))[:, None]
        deviations[rep] = deviations[rep] + h if rep in deviations else h
    error = standard_error(deviations)
    return None if error is None else float(error[0])


def _kron_all(blocks: list[np.ndarray]) -> np.ndarray:
    out = blocks[0]
    for b in blocks[1:]:
        out = np.kron(out, b)
    return out
