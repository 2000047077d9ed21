"""Trust-region state of a search, rebuilt from the trial history.

The trust region follows TuRBO (Eriksson, Pearce, Gardner, Turner and Poloczek
2019, "Scalable global optimization via local Bayesian optimization",
NeurIPS): the acquisition function is maximised over a box centred on the
best trial, with side lengths ``L * w_i`` where ``w_i`` are the GP's ARD
lengthscales divided by their geometric mean (so the box is longer along
directions the objective changes slowly in) and clipped to the unit cube.
``L`` starts at ``0.8``, doubles (up to ``1.6``) after ``3`` consecutive
successful batches and halves after ``ceil(max(4, d) / q)`` consecutive
failed batches; a batch succeeds when its best value improves on the best
before it by more than ``1e-3`` of its magnitude (the constants of the paper).
When ``L`` falls below ``0.5**7`` the region has collapsed: TuRBO restarts
with a fresh design; here the next batch is a global one (expected
improvement over the whole cube) and the region starts again at ``0.8``
around the best trial. The region starts after a warm-up of global batches
(``SearchSettings.trust_region_warmup``, ``2 d`` proposals by default, our
choice) so that it is centred on a best trial the model-based search has
already looked for; warm-up batches leave the counters alone.

As in TuRBO, a trust-region proposal uses a local model: the objective GP
refitted to the trials near the region (inside the box doubled about its
centre, and at least the initial-design size of nearest trials), standardised
on them. A global GP standardised on the whole range of the objective has a
noise floor that is a fixed fraction of that range and so cannot resolve the
small differences near the best trial that the region is there to refine
(see ``Search._fit_local``).

The state is a pure function of the finished trials, their batches and the
kind of each proposal batch, so it is recomputed, never stored: a resumed
search has the same state as the uninterrupted one.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

import numpy as np

__all__ = [
    "GLOBAL",
    "TRUST_REGION",
    "TrustRegionState",
    "trust_region_bounds",
    "trust_region_state",
]

GLOBAL = "global"
TRUST_REGION = "trust_region"

#: Constants of Eriksson et al. (2019), section 2 and appendix.
LENGTH_INIT = 0.8
LENGTH_MIN = 0.5**7
LENGTH_MAX = 1.6
SUCCESS_TOLERANCE = 3
IMPROVEMENT_FRACTION = 1e-3


@dataclass(frozen=True)
class TrustRegionState:
    """Side-length scale and counters of the trust region.

    Attributes
    ----------
    length : float
        Base side length ``L`` on the unit cube.
    successes, failures : int
        Consecutive successful / failed trust-region batches.
    restart : bool
        True when the region has just collapsed: the next batch is global.
    n_restarts : int
        Collapses so far.
    """

    length: float = LENGTH_INIT
    successes: int = 0
    failures: int = 0
    restart: bool = False
    n_restarts: int = 0


def failure_tolerance(dim: int, q: int) -> int:
    """Failed batches before the region shrinks: ``ceil(max(4 / q, d / q))``."""
    return math.ceil(max(4.0 / q, dim / q))


def trust_region_state(
    observations: Iterable[tuple[int, int, float, bool]],
    kinds: Mapping[int, str],
    dim: int,
    q: int,
) -> TrustRegionState:
    """Replay the trial history into the current trust-region state.

    Parameters
    ----------
    observations : iterable of (trial, batch, value, ok)
        Finished trials (value minimised; ignored when not ok).
    kinds : mapping of trial to str
        Kind of each model-based proposal (``"global"`` or ``"trust_region"``).
    dim : int
        Dimension of the search.
    q : int
        Batch size (sets the failure tolerance).

    Returns
    -------
    TrustRegionState
        The state after every fully finished trust-region batch, in batch order.
        A global batch after a collapse clears the restart flag.
    """
    obs = sorted(observations)
    by_batch: dict[int, list[tuple[int, float, bool]]] = {}
    for trial, batch, value, ok in obs:
        by_batch.setdefault(batch, []).append((trial, value, ok))
    tr_batches = sorted({b for t, b, _, _ in obs if kinds.get(t) == TRUST_REGION})
    global_batches = sorted({b for t, b, _, _ in obs if kinds.get(t) == GLOBAL})
    tol = failure_tolerance(dim, q)
    length, succ, fail, restart, n_restarts = LENGTH_INIT, 0, 0, False, 0
    events = sorted([(b, TRUST_REGION) for b in tr_batches]
                    + [(b, GLOBAL) for b in global_batches])
    for batch, kind in events:
        members = by_batch[batch]
        if kind == GLOBAL:
            if restart:
                restart = False
            continue
        first = min(t for t, _, _ in members)
        before = [v for t, _, v, ok in obs if ok and t < first]
        best_before = min(before) if before else math.inf
        vals = [v for _, v, ok in members if ok]
        best_now = min(vals) if vals else math.inf
        improved = best_now < best_before - IMPROVEMENT_FRACTION * abs(best_before) \
            if math.isfinite(best_before) else math.isfinite(best_now)
        if improved:
            succ, fail = succ + 1, 0
        else:
            succ, fail = 0, fail + 1
        if succ >= SUCCESS_TOLERANCE:
            length, succ = min(2.0 * length, LENGTH_MAX), 0
        elif fail >= tol:
            length, fail = length / 2.0, 0
        if length < LENGTH_MIN:
            length, succ, fail, restart = LENGTH_INIT, 0, 0, True
            n_restarts += 1
    return TrustRegionState(length, succ, fail, restart, n_restarts)


def trust_region_bounds(center: np.ndarray, lengthscales: np.ndarray, length: float
                        ) -> np.ndarray:
    """The box of a trust region on the unit cube.

    Parameters
    ----------
    center : ndarray of shape (d,)
        Best trial (unit cube).
    lengthscales : ndarray of shape (d,)
        ARD lengthscales of the objective GP (unit cube).
    length : float
        Base side length ``L``.

    Returns
    -------
    ndarray of shape (2, d)
        Lower and upper corners, inside ``[0, 1]``.
    """
    ls = np.asarray(lengthscales, dtype=float).reshape(-1)
    w = ls / np.exp(np.mean(np.log(ls)))
    half = 0.5 * length * w
    c = np.asarray(center, dtype=float).reshape(-1)
    lo = np.clip(c - half, 0.0, 1.0)
    hi = np.clip(c + half, 0.0, 1.0)
    return np.stack([lo, hi])
