"""Gaussian-process surrogates of the objective and of forward-run feasibility.

Objective model
    A :class:`botorch.models.SingleTaskGP` on the unit cube with a Matern 5/2
    kernel with one lengthscale per coefficient (ARD) and the dimension-scaled
    log-normal lengthscale prior of Hvarfner et al. (2024, "Vanilla Bayesian
    optimization performs great in high dimensions"), which is also botorch's
    default prior; Matern 5/2 rather than the squared exponential because
    misfit surfaces of forward models are twice but not infinitely
    differentiable in practice (Snoek et al. 2012 make the same choice). The
    outcome (``-log reduced_chi2`` or ``-value``; the search maximises) is
    standardised by :class:`botorch.models.transforms.Standardize`. The
    hyperparameters are refitted on every proposal by
    :func:`botorch.fit.fit_gpytorch_mll` (maximum a posteriori of the exact
    marginal likelihood). A refit starts from the previous proposal's
    hyperparameters when they score a higher marginal likelihood (priors
    included) on the new data than the default start does; the optimiser then
    needs a few L-BFGS-B steps instead of tens to hundreds.

Feasibility model
    Failed forward runs carry no misfit, so they are kept out of the objective
    model. A second GP regresses the failure indicator (1 failed, 0 ok) on all
    trials, Rasmussen and Williams (2006, section 6.5, least-squares
    classification); its posterior gives the probability that ``g(x) < 1/2``,
    i.e. that a run succeeds, and the acquisition is weighted by it
    (constrained expected improvement, Gardner et al. 2014, "Bayesian
    optimization with inequality constraints", ICML). It is only built once a
    trial has failed, and its hyperparameters are re-optimised only when a new
    failure has arrived since the last optimisation (in between, the GP is
    conditioned on the new trials with the previous hyperparameters).
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping, Sequence

import numpy as np
import torch
from botorch.fit import fit_gpytorch_mll
from botorch.models import ModelListGP, SingleTaskGP
from botorch.models.model import Model
from botorch.models.transforms import Standardize
from botorch.models.utils.gpytorch_modules import get_covar_module_with_dim_scaled_prior
from gpytorch.constraints import GreaterThan
from gpytorch.kernels import MaternKernel, ScaleKernel
from gpytorch.likelihoods import GaussianLikelihood
from gpytorch.mlls import ExactMarginalLogLikelihood

from ..exceptions import ConvergenceWarning, InputDataError

__all__ = [
    "FEASIBILITY_THRESHOLD",
    "combined_model",
    "fit_feasibility_model",
    "fit_objective_model",
    "gp_with_fixed_hyperparameters",
    "hyperparameters",
    "map_objective",
    "set_hyperparameters",
]

#: A trial is predicted feasible where the failure-indicator GP is below this.
FEASIBILITY_THRESHOLD = 0.5

DTYPE = torch.float64


def _as_tensor(a: np.ndarray | torch.Tensor) -> torch.Tensor:
    return torch.as_tensor(np.asarray(a, dtype=float), dtype=DTYPE)


def hyperparameters(model: SingleTaskGP) -> dict[str, list[float]]:
    """The raw (unconstrained) hyperparameters of a GP, JSON-ready.

    Parameters
    ----------
    model : SingleTaskGP

    Returns
    -------
    dict of str to list of float
        ``{parameter name: flattened values}``; :func:`set_hyperparameters`
        loads them into a GP of the same structure.
    """
    return {k: v.detach().reshape(-1).tolist() for k, v in model.named_parameters()}


def set_hyperparameters(model: SingleTaskGP, values: Mapping[str, Sequence[float]]) -> bool:
    """Load raw hyperparameters (from :func:`hyperparameters`) into ``model``.

    Returns
    -------
    bool
        False, and ``model`` unchanged, when the names or sizes do not match
        (another dimension or model structure).
    """
    params = dict(model.named_parameters())
    if set(params) != set(values):
        return False
    new = {}
    for k, p in params.items():
        v = torch.as_tensor(list(values[k]), dtype=p.dtype)
        if v.numel() != p.numel() or not torch.all(torch.isfinite(v)):
            return False
        new[k] = v.reshape(p.shape)
    with torch.no_grad():
        for k, p in params.items():
            p.copy_(new[k])
    return True


def map_objective(mll: ExactMarginalLogLikelihood) -> float:
    """Marginal log likelihood plus log priors at the current hyperparameters."""
    model = mll.model
    model.train()
    with torch.no_grad(), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            value = float(mll(model(*model.train_inputs), model.train_targets).sum())
        except Exception:  # e.g. a Cholesky failure at these hyperparameters
            return -float("inf")
    return value if np.isfinite(value) else -float("inf")


def _warm_start(mll: ExactMarginalLogLikelihood, warm: Mapping[str, Sequence[float]] | None) -> None:
    """Start from ``warm`` if it scores better than the default start on this data."""
    if not warm:
        return
    model = mll.model
    default = hyperparameters(model)
    default_score = map_objective(mll)
    if not set_hyperparameters(model, warm):
        return
    if map_objective(mll) < default_score:
        set_hyperparameters(model, default)


def _fit(model: SingleTaskGP, max_attempts: int,
         warm_start: Mapping[str, Sequence[float]] | None = None,
         max_iter: int = 200, optimize: bool = True) -> SingleTaskGP:
    if not optimize and warm_start and set_hyperparameters(model, warm_start):
        model.eval()  # condition on the data with the given hyperparameters
        return model
    mll = ExactMarginalLogLikelihood(model.likelihood, model)
    _warm_start(mll, warm_start)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            fit_gpytorch_mll(mll, optimizer_kwargs={"options": {"maxiter": max_iter}},
                             max_attempts=max_attempts)
        except Exception as exc:  # keep the prior-mode hyperparameters
            warnings.warn(
                f"GP hyperparameter fit failed ({type(exc).__name__}: {exc}); using the "
                "initial hyperparameters for this proposal.",
                ConvergenceWarning,
                stacklevel=3,
            )
    model.eval()
    return model


def fit_objective_model(
    train_u: np.ndarray,
    train_y: np.ndarray,
    *,
    max_attempts: int = 3,
    warm_start: Mapping[str, Sequence[float]] | None = None,
) -> SingleTaskGP:
    """Fit the objective GP.

    Parameters
    ----------
    train_u : ndarray of shape (n, d)
        Unit-cube inputs of the successful trials.
    train_y : ndarray of shape (n,)
        Outcome to *maximise* (finite; e.g. ``-log(reduced_chi2)``).
    max_attempts : int, default=3
        Attempts of :func:`botorch.fit.fit_gpytorch_mll`.
    warm_start : dict, optional
        Raw hyperparameters of an earlier fit (:func:`hyperparameters`); used
        as the starting point when they score better than the default start.

    Returns
    -------
    SingleTaskGP
        Fitted model in eval mode; its posterior is in the units of ``train_y``.
    """
    x = _as_tensor(train_u)
    y = _as_tensor(train_y).reshape(-1, 1)
    if not torch.all(torch.isfinite(y)):
        raise InputDataError("fit_objective_model: train_y must be finite (never feed NaN to the GP); "
                             "drop the failed trials first.")
    d = x.shape[-1]
    model = SingleTaskGP(
        x,
        y,
        covar_module=get_covar_module_with_dim_scaled_prior(ard_num_dims=d, use_rbf_kernel=False),
        outcome_transform=Standardize(m=1),
    )
    return _fit(model, max_attempts, warm_start)


def fit_feasibility_model(
    train_u: np.ndarray,
    failed: np.ndarray,
    *,
    max_attempts: int = 3,
    warm_start: Mapping[str, Sequence[float]] | None = None,
    optimize: bool = True,
) -> SingleTaskGP:
    """Fit the failure-indicator GP on all trials.

    Parameters
    ----------
    train_u : ndarray of shape (n, d)
        Unit-cube inputs of all finished trials.
    failed : ndarray of shape (n,)
        True where the forward run failed.
    max_attempts : int, default=3
        Attempts of :func:`botorch.fit.fit_gpytorch_mll`.
    warm_start : dict, optional
        Raw hyperparameters of an earlier fit, as for :func:`fit_objective_model`.
    optimize : bool, default=True
        ``False`` with a ``warm_start``: keep those hyperparameters and only
        condition on the trials (the search does this until a new failure
        arrives).

    Returns
    -------
    SingleTaskGP
        Model of the indicator (1 failed, 0 ok); no outcome transform, so the
        threshold :data:`FEASIBILITY_THRESHOLD` applies to its raw output.
    """
    x = _as_tensor(train_u)
    y = _as_tensor(np.asarray(failed, dtype=float)).reshape(-1, 1)
    d = x.shape[-1]
    model = SingleTaskGP(
        x,
        y,
        covar_module=ScaleKernel(
            get_covar_module_with_dim_scaled_prior(ard_num_dims=d, use_rbf_kernel=False)
        ),
        outcome_transform=None,
    )
    return _fit(model, max_attempts, warm_start, optimize=optimize)


def combined_model(objective: SingleTaskGP, feasibility: SingleTaskGP | None) -> Model:
    """Objective alone, or a two-output :class:`ModelListGP` (objective, failure)."""
    if feasibility is None:
        return objective
    return ModelListGP(objective, feasibility)


def gp_with_fixed_hyperparameters(
    train_u: np.ndarray,
    train_y: np.ndarray,
    *,
    lengthscales: Sequence[float],
    outputscale: float,
    noise_variance: float,
    mean_constant: float = 0.0,
) -> SingleTaskGP:
    """A Matern 5/2 ARD GP with given hyperparameters (no fit, no outcome transform).

    Used to check the surrogate's posterior against reference implementations
    (scikit-learn's ``GaussianProcessRegressor``; Rasmussen and Williams 2006,
    eq. 2.25-2.26) and for notebook experiments.
    """
    x = _as_tensor(train_u)
    y = _as_tensor(train_y).reshape(-1, 1)
    d = x.shape[-1]
    kernel = ScaleKernel(MaternKernel(nu=2.5, ard_num_dims=d))
    kernel.base_kernel.lengthscale = torch.as_tensor(lengthscales, dtype=DTYPE).reshape(1, d)
    kernel.outputscale = torch.as_tensor(float(outputscale), dtype=DTYPE)
    likelihood = GaussianLikelihood(noise_constraint=GreaterThan(1e-12))
    model = SingleTaskGP(x, y, likelihood=likelihood, covar_module=kernel, outcome_transform=None)
    model.likelihood.noise = torch.as_tensor([float(noise_variance)], dtype=DTYPE)
    model.mean_module.constant.data.fill_(float(mean_constant))
    model.eval()
    return model
