"""Acquisition functions and their optimisation on the unit cube.

* One proposal, nothing pending: analytic log expected improvement
  (:class:`botorch.acquisition.LogExpectedImprovement`; Jones, Schonlau and Welch
  1998 for EI, Ament et al. 2023 for its logarithm), weighted by the probability
  of a successful run once a run has failed
  (:class:`botorch.acquisition.analytic.LogConstrainedExpectedImprovement`).
* Batches (``q > 1``) or pending points: quasi-Monte-Carlo batch log noisy
  expected improvement (:class:`botorch.acquisition.logei.qLogNoisyExpectedImprovement`),
  with the running trials as ``X_pending`` and the feasibility model as an
  outcome constraint; the batch is built by sequential greedy optimisation.

Both are maximised with :func:`botorch.optim.optimize_acqf` (multi-start L-BFGS-B
from the best of ``raw_samples`` random points).
"""

from __future__ import annotations

import contextlib
import warnings
from collections.abc import Iterator
from typing import Any

import numpy as np
import torch
from botorch.acquisition import AcquisitionFunction, LogExpectedImprovement
from botorch.acquisition.analytic import LogConstrainedExpectedImprovement
from botorch.acquisition.logei import qLogNoisyExpectedImprovement
from botorch.acquisition.objective import GenericMCObjective
from botorch.exceptions.warnings import OptimizationWarning
from botorch.models.model import Model
from botorch.optim import optimize_acqf
from botorch.sampling import SobolQMCNormalSampler
from linear_operator.utils.warnings import NumericalWarning

from .surrogate import DTYPE, FEASIBILITY_THRESHOLD

__all__ = ["make_acquisition", "optimize_acquisition", "quiet_seeded"]


def _objective_output(samples: torch.Tensor, X: torch.Tensor | None = None) -> torch.Tensor:
    return samples[..., 0]


def _feasibility_constraint(samples: torch.Tensor) -> torch.Tensor:
    # feasible where < 0 (botorch convention)
    return samples[..., 1] - FEASIBILITY_THRESHOLD


def make_acquisition(
    model: Model,
    train_u: np.ndarray,
    train_y: np.ndarray,
    *,
    q: int,
    pending_u: np.ndarray | None = None,
    has_feasibility: bool = False,
    mc_samples: int = 128,
    seed: int = 0,
) -> AcquisitionFunction:
    """Build the acquisition function for the next ``q`` proposals.

    Parameters
    ----------
    model : botorch Model
        Objective GP, or a two-output ModelListGP (objective, failure indicator)
        when ``has_feasibility``.
    train_u, train_y : ndarray of shapes (n, d) and (n,)
        Successful trials and their outcome (maximised).
    q : int
        Number of proposals.
    pending_u : ndarray of shape (m, d), optional
        Trials still running.
    has_feasibility : bool, default=False
        Whether ``model`` carries the failure-indicator output.
    mc_samples : int, default=128
        QMC samples of the batch form.
    seed : int, default=0
        Seed of the QMC sampler.
    """
    pending = None
    if pending_u is not None and len(pending_u):
        pending = torch.as_tensor(np.asarray(pending_u, dtype=float), dtype=DTYPE)
    best_f = float(np.max(train_y))
    if q == 1 and pending is None:
        if has_feasibility:
            return LogConstrainedExpectedImprovement(
                model, best_f=best_f, objective_index=0,
                constraints={1: (None, FEASIBILITY_THRESHOLD)},
            )
        return LogExpectedImprovement(model, best_f=best_f)
    sampler = SobolQMCNormalSampler(sample_shape=torch.Size([mc_samples]), seed=seed)
    kwargs: dict[str, Any] = {}
    if has_feasibility:
        kwargs = {
            "objective": GenericMCObjective(_objective_output),
            "constraints": [_feasibility_constraint],
        }
    return qLogNoisyExpectedImprovement(
        model,
        X_baseline=torch.as_tensor(np.asarray(train_u, dtype=float), dtype=DTYPE),
        sampler=sampler,
        X_pending=pending,
        prune_baseline=True,
        cache_root=False,
        **kwargs,
    )


@contextlib.contextmanager
def quiet_seeded(seed: int) -> Iterator[None]:
    """Context for one acquisition optimisation: torch's random state forked and seeded
    with ``seed`` (restored afterwards), and botorch's optimisation warnings silenced
    (restarts that stop early are retried by botorch itself)."""
    with torch.random.fork_rng(), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        warnings.simplefilter("ignore", OptimizationWarning)
        warnings.simplefilter("ignore", NumericalWarning)
        torch.manual_seed(seed)
        yield


def optimize_acquisition(
    acq: AcquisitionFunction,
    dim: int,
    *,
    q: int,
    num_restarts: int,
    raw_samples: int,
    seed: int,
    bounds: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Maximise ``acq`` over the unit cube, or over the box ``bounds`` inside it.

    Parameters
    ----------
    bounds : ndarray of shape (2, dim), optional
        Lower and upper corners of a trust region; default the whole cube.

    Returns
    -------
    candidates : ndarray of shape (q, dim)
    values : ndarray of shape (q,) or ()
        Acquisition value(s) at the candidates.
    """
    if bounds is None:
        box = torch.stack([torch.zeros(dim, dtype=DTYPE), torch.ones(dim, dtype=DTYPE)])
    else:
        box = torch.as_tensor(np.asarray(bounds, dtype=float).reshape(2, dim), dtype=DTYPE)
    with quiet_seeded(seed):
        cand, val = optimize_acqf(
            acq,
            bounds=box,
            q=q,
            num_restarts=num_restarts,
            raw_samples=raw_samples,
            sequential=q > 1,
            options={"maxiter": 200, "seed": seed % (2**31)},
        )
    if val is None:  # only with return_acq_values=False, which is not asked for
        raise RuntimeError("optimize_acqf returned no acquisition values.")
    return cand.detach().cpu().numpy().reshape(q, dim), val.detach().cpu().numpy()
