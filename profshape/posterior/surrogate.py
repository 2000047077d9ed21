"""A Gaussian-process model of the log-likelihood over the unit cube.

The GP is botorch's ``SingleTaskGP`` with a Matern 5/2 kernel with one
length-scale per coefficient (ARD), fitted by maximising the marginal
likelihood (``fit_gpytorch_mll``). The targets are the trials'
log-likelihoods, standardised, with values far below the best clipped (see
:class:`~profshape.posterior.PosteriorSettings`).

Posterior function samples ("GP realisations") are drawn by pathwise
conditioning (Wilson et al. 2020, "Efficiently sampling functions from
Gaussian process posteriors", ICML; Matheron's rule): a random-Fourier-feature
draw from the prior (Rahimi and Recht 2007) updated by the exact GP
posterior correction. Each realisation is a deterministic, cheap numpy
function, so an MCMC sampler can run on it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from scipy import linalg

from ..exceptions import InputDataError

if TYPE_CHECKING:
    from botorch.models import SingleTaskGP

__all__ = ["GPRealisation", "LogLikelihoodSurrogate", "fit_log_likelihood_surrogate"]

_MATERN_NU = 2.5


def _matern52(x1: np.ndarray, x2: np.ndarray, lengthscale: np.ndarray) -> np.ndarray:
    """Matern 5/2 correlation between rows of ``x1`` (n, d) and ``x2`` (m, d)."""
    a = x1 / lengthscale
    b = x2 / lengthscale
    sq = (a * a).sum(1)[:, None] + (b * b).sum(1)[None, :] - 2.0 * a @ b.T
    r = np.sqrt(np.maximum(sq, 0.0))
    s5r = np.sqrt(5.0) * r
    return (1.0 + s5r + 5.0 / 3.0 * r * r) * np.exp(-s5r)


@dataclass(frozen=True)
class GPRealisation:
    """One posterior function sample of the log-likelihood surrogate.

    Call it on unit-cube points of shape (n, d) to get log-likelihood values
    of shape (n,) [nats].
    """

    omega: np.ndarray  # (M, d) spectral frequencies, already divided by the length-scales
    phase: np.ndarray  # (M,)
    weights: np.ndarray  # (M,)
    feature_scale: float
    train_x: np.ndarray
    alpha: np.ndarray  # (n_train,) Matheron update weights
    lengthscale: np.ndarray
    outputscale: float
    constant: float
    y_mean: float
    y_std: float

    def _prior(self, u: np.ndarray) -> np.ndarray:
        return self.feature_scale * np.cos(u @ self.omega.T + self.phase) @ self.weights

    def __call__(self, u: np.ndarray) -> np.ndarray:
        u2 = np.atleast_2d(np.asarray(u, dtype=float))
        k = self.outputscale * _matern52(u2, self.train_x, self.lengthscale)
        f = self.constant + self._prior(u2) + k @ self.alpha
        return self.y_mean + self.y_std * f


class LogLikelihoodSurrogate:
    """GP regression of log-likelihood on unit-cube coordinates.

    Use :func:`fit_log_likelihood_surrogate` to build one.

    Attributes
    ----------
    model : botorch.models.SingleTaskGP
        The fitted model (standardised targets).
    train_u : ndarray of shape (n, d)
        Training inputs in the unit cube.
    train_log_likelihood : ndarray of shape (n,)
        Training targets [nats] after clipping at the floor.
    best_log_likelihood : float
        Largest training log-likelihood [nats].
    """

    def __init__(self, model: SingleTaskGP, train_u: np.ndarray, train_ll: np.ndarray,
                 y_mean: float, y_std: float, floor: float) -> None:
        self.model = model
        self.train_u = train_u
        self.train_log_likelihood = train_ll
        self.y_mean = float(y_mean)
        self.y_std = float(y_std)
        self.floor = float(floor)
        self.best_log_likelihood = float(np.max(train_ll))
        covar = model.covar_module
        self.lengthscale = covar.base_kernel.lengthscale.detach().cpu().numpy().reshape(-1)
        self.outputscale = float(covar.outputscale.detach().cpu())
        self.noise = float(model.likelihood.noise.detach().cpu().reshape(-1)[0])
        self.constant = float(model.mean_module.constant.detach().cpu().reshape(-1)[0])
        y = (train_ll - self.y_mean) / self.y_std
        k = self.outputscale * _matern52(train_u, train_u, self.lengthscale)
        k[np.diag_indices_from(k)] += self.noise
        self._chol = linalg.cho_factor(k, lower=True)
        self._alpha = linalg.cho_solve(self._chol, y - self.constant)

    @property
    def dim(self) -> int:
        """Number of input dimensions d."""
        return int(self.train_u.shape[1])

    def mean(self, u: np.ndarray) -> np.ndarray:
        """Posterior mean of the log-likelihood [nats] at unit-cube points (n, d) → (n,)."""
        u2 = np.atleast_2d(np.asarray(u, dtype=float))
        k = self.outputscale * _matern52(u2, self.train_u, self.lengthscale)
        return self.y_mean + self.y_std * (self.constant + k @ self._alpha)

    def predict(
        self, u: np.ndarray, include_noise: bool = False
    ) -> tuple[np.ndarray, np.ndarray]:
        """Posterior mean and standard deviation [nats] of the latent log-likelihood.

        Parameters
        ----------
        u : array_like of shape (n, d)
        include_noise : bool, default=False
            Add the fitted observation-noise variance (the scatter of repeated
            forward runs, e.g. from solver convergence) to the variance: the
            predictive spread of a new forward run.

        Returns
        -------
        mean, std : ndarray of shape (n,)
        """
        u2 = np.atleast_2d(np.asarray(u, dtype=float))
        k = self.outputscale * _matern52(u2, self.train_u, self.lengthscale)
        mean = self.y_mean + self.y_std * (self.constant + k @ self._alpha)
        v = linalg.cho_solve(self._chol, k.T)
        var = np.maximum(self.outputscale - np.einsum("ij,ji->i", k, v), 0.0)
        if include_noise:
            var = var + self.noise
        return mean, self.y_std * np.sqrt(var)

    def draw_realisations(
        self, n: int, n_features: int = 1024, seed: int | None = None
    ) -> list[GPRealisation]:
        """Draw ``n`` posterior function samples by pathwise conditioning.

        The prior draw uses random Fourier features of the Matern 5/2 kernel:
        its spectral density is a multivariate Student t with ``2 nu = 5``
        degrees of freedom and scale ``1 / lengthscale`` (Rasmussen and
        Williams 2006, eq. 4.15), so ``omega = z / lengthscale * sqrt(5 / g)``
        with ``z ~ N(0, I)`` and ``g ~ chi2(5)``. The posterior sample is then
        ``f(u) = f_prior(u) + k(u, U) (K + s2 I)^-1 (y - f_prior(U) - eps)``.
        """
        rng = np.random.default_rng(seed)
        d = self.dim
        y = (self.train_log_likelihood - self.y_mean) / self.y_std - self.constant
        out = []
        for _ in range(int(n)):
            z = rng.standard_normal((n_features, d))
            g = rng.chisquare(2 * _MATERN_NU, size=(n_features, 1))
            omega = z * np.sqrt(2 * _MATERN_NU / g) / self.lengthscale
            phase = rng.uniform(0.0, 2.0 * np.pi, n_features)
            weights = rng.standard_normal(n_features)
            scale = float(np.sqrt(2.0 * self.outputscale / n_features))
            f_train = scale * np.cos(self.train_u @ omega.T + phase) @ weights
            eps = rng.standard_normal(len(y)) * np.sqrt(self.noise)
            alpha = linalg.cho_solve(self._chol, y - f_train - eps)
            out.append(
                GPRealisation(
                    omega=omega, phase=phase, weights=weights, feature_scale=scale,
                    train_x=self.train_u, alpha=alpha, lengthscale=self.lengthscale,
                    outputscale=self.outputscale, constant=self.constant,
                    y_mean=self.y_mean, y_std=self.y_std,
                )
            )
        return out


def fit_log_likelihood_surrogate(
    unit: np.ndarray,
    log_likelihood: np.ndarray,
    *,
    floor_nats: float = 150.0,
    max_trials: int = 400,
    seed: int | None = 0,
    warm_start: LogLikelihoodSurrogate | None = None,
    max_iter: int | None = None,
) -> LogLikelihoodSurrogate:
    """Fit a Matern 5/2 ARD ``SingleTaskGP`` to log-likelihood values.

    Parameters
    ----------
    unit : array_like of shape (n, d)
        Trial coordinates in the unit cube.
    log_likelihood : array_like of shape (n,)
        Finite log-likelihoods [nats] of those trials.
    floor_nats : float, default=150.0
        Values below ``max - floor_nats`` are clipped to it.
    max_trials : int, default=400
        Keep at most this many trials (the highest log-likelihoods).
    seed : int or None, default=0
        Torch seed of the hyper-parameter fit.
    warm_start : LogLikelihoodSurrogate, optional
        A previous fit whose hyper-parameters start this one (a refit after a
        few new trials); the fit then makes a single attempt.
    max_iter : int, optional
        Most L-BFGS iterations of the hyper-parameter fit (default: botorch's).

    Raises
    ------
    InputDataError
        Shapes disagree, values are non-finite, or fewer than ``d + 2`` trials.
    """
    import torch
    from botorch.fit import fit_gpytorch_mll
    from botorch.models import SingleTaskGP
    from gpytorch.kernels import MaternKernel, ScaleKernel
    from gpytorch.mlls import ExactMarginalLogLikelihood

    u = np.atleast_2d(np.asarray(unit, dtype=float))
    ll = np.asarray(log_likelihood, dtype=float).reshape(-1)
    if u.shape[0] != ll.shape[0]:
        raise InputDataError(
            f"surrogate: {u.shape[0]} unit-cube rows but {ll.shape[0]} log-likelihood values."
        )
    if not (np.all(np.isfinite(u)) and np.all(np.isfinite(ll))):
        raise InputDataError("surrogate: unit coordinates and log-likelihoods must be finite.")
    d = u.shape[1]
    if u.shape[0] < d + 2:
        raise InputDataError(
            f"surrogate: need at least d + 2 = {d + 2} ok trials to fit the GP; got "
            f"{u.shape[0]}. Run more search trials first."
        )
    # Remove exact duplicates (repeated points make K singular without noise).
    _, keep = np.unique(np.round(u, 12), axis=0, return_index=True)
    keep = np.sort(keep)
    u, ll = u[keep], ll[keep]
    if len(ll) > max_trials:
        order = np.argsort(-ll)[:max_trials]
        u, ll = u[order], ll[order]
    floor = float(np.max(ll) - floor_nats)
    ll = np.maximum(ll, floor)
    y_mean = float(np.mean(ll))
    y_std = float(np.std(ll))
    if not y_std > 0:
        y_std = 1.0
    if seed is not None:
        torch.manual_seed(int(seed))
    tx = torch.as_tensor(u, dtype=torch.float64)
    ty = torch.as_tensor(((ll - y_mean) / y_std)[:, None], dtype=torch.float64)
    model = SingleTaskGP(
        tx,
        ty,
        covar_module=ScaleKernel(MaternKernel(nu=_MATERN_NU, ard_num_dims=d)),
        outcome_transform=None,
    )
    mll = ExactMarginalLogLikelihood(model.likelihood, model)
    fit_kwargs: dict = {}
    if max_iter is not None:
        fit_kwargs["optimizer_kwargs"] = {"options": {"maxiter": int(max_iter)}}
    if warm_start is not None and warm_start.dim == d:
        covar = model.covar_module
        covar.base_kernel.lengthscale = torch.as_tensor(warm_start.lengthscale,
                                                        dtype=torch.float64).reshape(1, d)
        covar.outputscale = torch.as_tensor(warm_start.outputscale, dtype=torch.float64)
        model.likelihood.noise = torch.as_tensor(
            [max(warm_start.noise, 1.1e-6)], dtype=torch.float64)
        fit_kwargs["max_attempts"] = 1
    fit_gpytorch_mll(mll, **fit_kwargs)
    model.eval()
    return LogLikelihoodSurrogate(model, u, ll, y_mean, y_std, floor)
