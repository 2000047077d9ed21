"""Several modes: find distinct basins to start ensembles in, and pool ensembles with weights.

An ensemble sampler started in one basin of a multi-modal posterior rarely
leaves it, and walkers split over two basins keep their split whatever the
basins' masses. So independent ensembles are started in distinct basins and
pooled afterwards with weights from a Laplace estimate of each basin's mass
(Lewis and Raftery 1997, JASA 92:648; as in :mod:`~profshape.posterior.compare`):

.. math:: \\ln w_b = \\max_{\\theta \\in b} \\ln p(\\theta) + \\tfrac12 \\ln\\det(2\\pi\\Sigma_b),

with :math:`\\Sigma_b` the sample covariance of the ensembles that ended in
basin *b*. Ensembles that end in the same basin share it.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from scipy import optimize

__all__ = ["find_basins", "pool_by_basin"]

#: Two optima are in one basin when the target along the segment between them
#: never drops more than this below the lower of the two (common practice, no source).
SADDLE_NATS = 2.0
#: Basins whose best value lies this far below the best are dropped: their mass
#: is below exp(-20) ~ 2e-9 of the best one's unless their volume is enormous.
BASIN_FLOOR_NATS = 20.0
#: Two ensembles share a basin when each one's mean lies within this
#: Mahalanobis distance of the other's sample (common practice, no source).
SAME_BASIN_MAHALANOBIS = 3.0


def find_basins(
    target: Callable[[np.ndarray], np.ndarray],
    pool_u: np.ndarray,
    pool_score: np.ndarray,
    n_max: int,
    *,
    n_starts: int | None = None,
    extra_starts: list[np.ndarray] | None = None,
) -> list[tuple[np.ndarray, float]]:
    """Distinct local maxima of ``target`` over the unit cube, best first.

    Parameters
    ----------
    target : callable
        Vectorised ``(n, d) -> (n,)`` log-density (e.g. the surrogate's mean).
    pool_u, pool_score : ndarray
        Candidate starts (unit cube) and their scores; the best
        ``n_starts`` (default ``2 * n_max``) distinct ones start L-BFGS-B.
    extra_starts : list of ndarray, optional
        Further starts (e.g. the optima of a previous call), tried first.
    n_max : int
        At most this many basins are returned.

    Returns
    -------
    list of (u, value)
        The optimum of each basin and the target there.
    """
    d = pool_u.shape[1]
    order = np.argsort(-np.asarray(pool_score, dtype=float))
    n_starts = int(n_starts or 2 * n_max)
    starts: list[np.ndarray] = [np.clip(np.asarray(s, dtype=float), 0.0, 1.0)
                                for s in (extra_starts or [])]
    n_total = n_starts + len(starts)
    for i in order:
        if len(starts) >= n_total:
            break
        if all(np.max(np.abs(pool_u[i] - s)) > 1e-3 for s in starts):
            starts.append(pool_u[i])
    step = 1e-6

    def neg_and_grad(u: np.ndarray) -> tuple[float, np.ndarray]:
        # one batched call: the point and its d forward-difference neighbours (inward at
        # the upper bound, so every evaluation stays in the cube)
        h = np.where(u + step <= 1.0, step, -step)
        pts = np.vstack([u[None, :], u[None, :] + np.diag(h)])
        v = np.asarray(target(pts), dtype=float)
        if not np.isfinite(v[0]):
            return 1e300, np.zeros(d)
        g = np.where(np.isfinite(v[1:]), (v[1:] - v[0]) / h, 0.0)
        return -float(v[0]), -g

    optima = []
    for s in starts:
        res = optimize.minimize(neg_and_grad, s, jac=True, method="L-BFGS-B",
                                bounds=[(0.0, 1.0)] * d, options={"maxiter": 200})
        optima.append((np.clip(res.x, 0.0, 1.0), -float(res.fun)))
    optima.sort(key=lambda t: -t[1])
    if not optima:
        return []
    best = optima[0][1]
    basins: list[tuple[np.ndarray, float]] = []
    line = np.linspace(0.0, 1.0, 11)[1:-1, None]
    for u, v in optima:
        if v < best - BASIN_FLOOR_NATS:
            break
        same = False
        for b, bv in basins:
            seg = b[None, :] + line * (u - b)[None, :]
            if np.min(target(seg)) >= min(v, bv) - SADDLE_NATS:
                same = True
                break
        if not same:
            basins.append((u, v))
        if len(basins) >= n_max:
            break
    return basins


def pool_by_basin(
    samples: list[np.ndarray], log_prob: list[np.ndarray], rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray, dict[str, Any]]:
    """Weights of independent ensembles and a pooled sample drawn by those weights.

    Parameters
    ----------
    samples : list of ndarray (n_e, d)
        Each ensemble's kept sample.
    log_prob : list of ndarray (n_e,)
        Its log-density values (under its own target).
    rng : Generator

    Returns
    -------
    index : ndarray of shape (n, 2)
        (ensemble, row) of each pooled draw; ``n`` is the total sample size.
    group : ndarray of shape (n_ensembles,)
        Basin label of each ensemble.
    info : dict
        ``n_basins``, ``basin_weights`` (per basin, summing to 1),
        ``ensemble_basin``.
    """
    n_e = len(samples)
    means = [s.mean(axis=0) for s in samples]
    covs = [np.atleast_2d(np.cov(s.T)) + 1e-12 * np.eye(s.shape[1]) for s in samples]
    parent = list(range(n_e))

    def find(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    def maha(x: np.ndarray, m: np.ndarray, c: np.ndarray) -> float:
        r = x - m
        return float(np.sqrt(max(r @ np.linalg.solve(c, r), 0.0)))

    for i in range(n_e):
        for j in range(i + 1, n_e):
            if (maha(means[i], means[j], covs[j]) <= SAME_BASIN_MAHALANOBIS
                    and maha(means[j], means[i], covs[i]) <= SAME_BASIN_MAHALANOBIS):
                parent[find(i)] = find(j)
    roots = sorted({find(i) for i in range(n_e)})
    group = np.array([roots.index(find(i)) for i in range(n_e)])
    log_w = np.zeros(len(roots))
    for g in range(len(roots)):
        members = np.flatnonzero(group == g)
        pooled = np.vstack([samples[i] for i in members])
        cov = np.atleast_2d(np.cov(pooled.T))
        sign, logdet = np.linalg.slogdet(2.0 * np.pi * cov)
        peak = float(np.mean([np.max(log_prob[i]) for i in members]))
        log_w[g] = peak + 0.5 * (logdet if sign > 0 else -np.inf)
    w = np.exp(log_w - np.max(log_w)) if np.isfinite(log_w).any() else np.ones(len(roots))
    w = w / w.sum()
    total = int(sum(len(s) for s in samples))
    counts = rng.multinomial(total, w) if len(roots) > 1 else np.array([total])
    index = []
    for g, k in enumerate(counts):
        members = np.flatnonzero(group == g)
        rows = np.concatenate([np.column_stack([np.full(len(samples[i]), i),
                                                np.arange(len(samples[i]))]) for i in members])
        pick = rng.choice(len(rows), size=int(k), replace=int(k) > len(rows))
        index.append(rows[np.sort(pick)])
    info = {"n_basins": len(roots), "basin_weights": w.tolist(),
            "ensemble_basin": group.tolist()}
    return np.vstack(index) if index else np.zeros((0, 2), dtype=int), group, info
