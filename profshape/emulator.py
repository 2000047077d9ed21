r"""Reduced-basis Gaussian-process emulator of a forward model's outputs.

A calibration misfit is a sum of squared residuals: sharply curved in the
coefficients even where the simulated profiles themselves vary smoothly. So
instead of modelling the misfit, :class:`OutputEmulator` models what the
forward model returns (the ion velocity at the measured positions, the
scalars, ...), as in Higdon, Gattiker, Williams and Rightley (2008,
"Computer model calibration using high-dimensional output", JASA 103):

1. the outputs of the ``n`` training runs, ``Y`` of shape ``(n, m)``, are
   centred by their column means and divided by a column scale (given, e.g.
   the measurement sigma of each value, or by default the column's standard
   deviation), ``Z = (Y - mean) / scale``;
2. a thin SVD ``Z = U S V^T`` gives the reduced basis: the first ``k`` right
   singular vectors, ``k`` the smallest number explaining the fraction
   ``variance_fraction`` of the total variance of ``Z`` (and, when given, leaving
   a mean residual variance per column below ``residual_tolerance``), capped
   at ``max_components`` and ``n - 1``;
3. the ``k`` component scores ``Z V_k`` (columns of ``U S``) get independent
   Gaussian processes: one batched :class:`botorch.models.SingleTaskGP` with
   a Matern 5/2 kernel with one lengthscale per coefficient (ARD; the
   dimension-scaled log-normal lengthscale prior of Hvarfner et al. 2024,
   botorch's default) and its own hyperparameters per component, outcomes
   standardised, a noise variance learnt down to ``1e-8`` of each score's
   variance (the forward model is nearly deterministic), hyperparameters
   fitted by maximum a posteriori of the exact marginal likelihood
   (:func:`botorch.fit.fit_gpytorch_mll`);
4. the discarded components are not dropped silently: their variance over
   the training runs, per column, is the residual variance
   ``residual_variance_`` (output units squared), added to every predictive
   variance and sampled as independent noise.

A prediction at coefficients ``x`` is then

.. math::

    y(x) = \mathrm{mean} + \mathrm{scale} \odot (V_k\, s(x)) + \varepsilon,
    \qquad s_c(x) \sim \mathrm{GP}_c, \qquad
    \varepsilon_j \sim N(0, \mathrm{residual\_variance}_j),

with marginal variance
``var_j(x) = scale_j^2 sum_c V_{jc}^2 var_c(x) + residual_variance_j``
(the score GPs are independent).

Interface
---------
``OutputEmulator().fit(X_unit, Y, scale=None)`` returns the fitted emulator;

``predict(X_unit) -> (mean, var)``: numpy arrays of shape ``(k, m)``, the
marginal predictive mean and variance in output units;

``sample(X_unit, n_samples, seed)``: numpy array ``(n_samples, k, m)`` of
joint draws (correlated across the ``k`` points and the ``m`` outputs);

``posterior(X)``: for a torch tensor ``X`` of shape ``(..., q, d)``, a botorch
:class:`~botorch.posteriors.Posterior` (:class:`OutputPosterior`) of the
outputs, shape ``(..., q, m)``, with ``mean``, ``variance``, ``rsample`` and
``rsample_from_base_samples`` (so quasi-Monte-Carlo samplers and MC
acquisition functions work with it, differentiably in ``X``);

``model()``: a botorch :class:`~botorch.models.model.Model`
(:class:`EmulatorModel`) with ``num_outputs = m`` wrapping ``posterior``, to
hand to MC acquisition functions with an objective that maps output samples
to a composite misfit (Astudillo and Frazier 2019, "Bayesian optimization of
composite functions", ICML).

The inputs are the unit-cube coordinates of the coefficients (``(n, d)``);
the emulator knows nothing of the calibration: build ``Y`` and the misfit
from it with :class:`profshape.output_layout.OutputLayout`. For a
calibration, as the search does (``Search.emulator_`` is such a fit)::

    from profshape.output_layout import OutputLayout
    layout = OutputLayout.from_problem(problem)
    ok = trials[trials["status"] == "ok"]
    U = ok[[f"u__{n}" for n in problem.names]].to_numpy()
    Y = np.array([layout.vector_from_json(p) for p in ok["predictions"]])
    em = OutputEmulator(residual_tolerance=0.01).fit(U, Y, scale=layout.scale)
    mean, var = em.predict(U_new)                         # (k, m) each
    # log-likelihood with the emulator's variance added to the data variance
    # (the slope columns enter through the position uncertainty, at their mean)
    loglike = layout.log_likelihood(mean, extra_variance=layout.values(var))
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from typing import Any

import numpy as np
import torch
from botorch.fit import fit_gpytorch_mll
from botorch.models import SingleTaskGP
from botorch.models.model import Model
from botorch.models.transforms import Standardize
from botorch.models.utils.gpytorch_modules import get_covar_module_with_dim_scaled_prior
from botorch.posteriors import Posterior
from gpytorch.constraints import GreaterThan
from gpytorch.likelihoods import GaussianLikelihood
from gpytorch.mlls import ExactMarginalLogLikelihood
from torch import Tensor

from .exceptions import ConvergenceWarning, InputDataError

__all__ = ["EmulatorModel", "OutputEmulator", "OutputPosterior"]

DTYPE = torch.float64
#: Lower bound of the score GPs' noise variance (standardised scores).
NOISE_FLOOR = 1e-8


class OutputEmulator:
    """Reduced-basis GP emulator of vector outputs (see the module docstring).

    Parameters
    ----------
    variance_fraction : float, default=0.999
        Fraction of the total variance of the scaled, centred outputs that the
        kept components must explain.
    max_components : int, default=12
        Cap on the number of components (each gets a GP).
    residual_tolerance : float or None, default=None
        If given, also keep components until the mean residual variance per
        column, in scaled units, is at most this (with ``scale`` = the
        measurement sigma, ``0.01`` means a residual of 0.1 sigma rms).
    max_fit_attempts : int, default=2
        Attempts of the hyperparameter fit.
    max_iter : int, default=150
        L-BFGS-B iterations of each hyperparameter fit.
    seed : int, default=0
        Seed of the hyperparameter-fit randomness (restarts after a failed fit).

    Attributes
    ----------
    n_components_ : int
        Components kept (0 when every output is constant).
    explained_fraction_ : float
        Fraction of the scaled variance they explain (1 with no variance).
    mean_ : ndarray of shape (m,)
        Column means of ``Y``.
    scale_ : ndarray of shape (m,)
        Column scales used (output units).
    basis_ : ndarray of shape (k, m)
        Kept right singular vectors (rows), in scaled units.
    residual_variance_ : ndarray of shape (m,)
        Variance of the discarded components per column over the training
        runs [output units squared]; part of every predictive variance.
    score_model_ : SingleTaskGP or None
        The batched GP of the ``k`` scores (``None`` when ``k = 0``).
    optimized_ : bool
        Whether this fit optimised the hyperparameters (``False``: loaded
        from ``warm_start`` with ``optimize=False``).
    train_X_, train_Y_ : ndarray
        Training data.
    """

    def __init__(self, variance_fraction: float = 0.999, max_components: int = 12,
                 residual_tolerance: float | None = None, max_fit_attempts: int = 2,
                 max_iter: int = 150, seed: int = 0) -> None:
        if not (0.0 < float(variance_fraction) <= 1.0):
            raise InputDataError(
                f"OutputEmulator: variance_fraction must be in (0, 1]; got {variance_fraction!r}.")
        if int(max_components) < 1:
            raise InputDataError(
                f"OutputEmulator: max_components must be >= 1; got {max_components!r}.")
        if residual_tolerance is not None and not float(residual_tolerance) > 0:
            raise InputDataError(
                "OutputEmulator: residual_tolerance must be > 0 or None; got "
                f"{residual_tolerance!r}.")
        self.variance_fraction = float(variance_fraction)
        self.max_components = int(max_components)
        self.residual_tolerance = None if residual_tolerance is None else float(residual_tolerance)
        self.max_fit_attempts = int(max_fit_attempts)
        self.max_iter = int(max_iter)
        self.seed = int(seed)
        self.score_model_: SingleTaskGP | None = None

    # ------------------------------------------------------------------ fit
    def fit(self, X_unit: Any, Y: Any, scale: Any | None = None,
            warm_start: dict[str, Sequence[float]] | None = None,
            optimize: bool = True, hyper_subset: Any | None = None) -> OutputEmulator:
        """Fit the basis and the score GPs.

        Parameters
        ----------
        X_unit : array_like of shape (n, d)
            Unit-cube coordinates of the training runs.
        Y : array_like of shape (n, m)
            Their outputs (finite).
        scale : array_like of shape (m,), optional
            Column scales (output units, > 0), e.g. the measurement sigma of
            each value so that the components are ranked by their weight in
            the chi-square. Default: the column standard deviation (floored
            at ``1e-12`` times the largest one, so constant columns do not blow up).
        warm_start : dict, optional
            Raw hyperparameters of an earlier fit (:meth:`hyperparameters`),
            used as the starting point when the number of components and the
            dimension match and they score better than the default start.
        optimize : bool, default=True
            Optimise the hyperparameters. ``False`` with a matching
            ``warm_start`` loads those hyperparameters and only conditions the
            GPs on the data (cheap); without one it optimises anyway.
        hyper_subset : array_like of int, optional
            Rows of ``X_unit`` on which the hyperparameters are optimised (the
            GPs are then conditioned on all rows with them); bounds the cost
            of the fit for large ``n``. Default: all rows.

        Returns
        -------
        OutputEmulator
            ``self``.
        """
        X = np.array(X_unit, dtype=float)  # copies: torch wants writable arrays
        Yn = np.array(Y, dtype=float)
        if X.ndim != 2 or Yn.ndim != 2 or X.shape[0] != Yn.shape[0]:
            raise InputDataError(
                f"OutputEmulator.fit: X_unit must be (n, d) and Y (n, m) with the same n; got "
                f"{X.shape} and {Yn.shape}.")
        if X.shape[0] < 2:
            raise InputDataError(f"OutputEmulator.fit: needs at least 2 runs; got {X.shape[0]}.")
        if not (np.all(np.isfinite(X)) and np.all(np.isfinite(Yn))):
            raise InputDataError("OutputEmulator.fit: X_unit and Y must be finite (no NaN or inf).")
        n, m = Yn.shape
        self.train_X_, self.train_Y_ = X.copy(), Yn.copy()
        self.mean_ = Yn.mean(axis=0)
        if scale is None:
            sd = Yn.std(axis=0)
            floor = 1e-12 * max(float(sd.max()), 1e-300)
            self.scale_ = np.maximum(sd, floor)
        else:
            s = np.asarray(scale, dtype=float).reshape(-1)
            if s.shape != (m,) or not np.all(np.isfinite(s)) or np.any(s <= 0):
                raise InputDataError(
                    f"OutputEmulator.fit: scale must be {m} finite values > 0; got shape {s.shape}.")
            self.scale_ = s
        Z = (Yn - self.mean_) / self.scale_
        _, sv, vt = np.linalg.svd(Z, full_matrices=False)
        power = sv**2
        total = float(power.sum())
        k_max = min(self.max_components, n - 1, int(np.sum(power > 1e-12 * max(total, 1e-300))))
        if total <= 0 or k_max < 1:
            k = 0
        else:
            remaining = total - np.cumsum(power)  # after keeping 1, 2, ... components
            k = k_max
            for j in range(1, k_max + 1):
                ok = remaining[j - 1] <= (1.0 - self.variance_fraction) * total
                if ok and self.residual_tolerance is not None:
                    ok = remaining[j - 1] / (n * m) <= self.residual_tolerance
                if ok:
                    k = j
                    break
        self.n_components_ = k
        self.explained_fraction_ = 1.0 if total <= 0 else float(power[:k].sum() / total)
        basis = vt[:k].copy()
        # sign convention (largest entry positive), so refits on grown data keep each
        # component's orientation and a warm start of its GP stays meaningful
        signs = np.sign(basis[np.arange(k), np.argmax(np.abs(basis), axis=1)]) if k else []
        self.basis_ = basis * np.asarray(signs, dtype=float).reshape(-1, 1) if k else basis
        scores = Z @ self.basis_.T  # (n, k)
        resid = Z - scores @ self.basis_
        self.residual_variance_ = (resid**2).mean(axis=0) * self.scale_**2
        self._basis_t = torch.as_tensor(self.basis_ * self.scale_, dtype=DTYPE)  # (k, m)
        self._mean_t = torch.as_tensor(self.mean_, dtype=DTYPE)
        self._resid_sd_t = torch.as_tensor(np.sqrt(self.residual_variance_), dtype=DTYPE)
        self.score_model_ = None
        self.optimized_ = False
        self._gp = None
        if k:
            self.score_model_ = self._fit_scores(X, scores, warm_start, optimize, hyper_subset)
            self._gp = _ScoreGP(self.score_model_, k)
        return self

    @staticmethod
    def _new_model(x: Tensor, y: Tensor) -> SingleTaskGP:
        k, d = y.shape[-1], x.shape[-1]
        batch = torch.Size([k] if k > 1 else [])
        # a forward model is (nearly) deterministic: the noise may fall to 1e-8 of each
        # score's variance (botorch's default floor of 1e-4 would blur the outputs by 1 %
        # of their spread, many measurement sigmas near a fit); no prior pulls it up
        likelihood = GaussianLikelihood(batch_shape=batch,
                                        noise_constraint=GreaterThan(NOISE_FLOOR))
        return SingleTaskGP(
            x, y, likelihood=likelihood,
            covar_module=get_covar_module_with_dim_scaled_prior(
                ard_num_dims=d, batch_shape=batch, use_rbf_kernel=False),
            outcome_transform=Standardize(m=k),
        )

    def _fit_scores(self, X: np.ndarray, scores: np.ndarray,
                    warm: dict[str, Sequence[float]] | None, optimize: bool = True,
                    subset: Any | None = None) -> SingleTaskGP:
        # deferred import: profshape.search imports this module's users, not the reverse
        from .search.surrogate import hyperparameters, map_objective, set_hyperparameters

        x = torch.as_tensor(X, dtype=DTYPE)
        y = torch.as_tensor(scores, dtype=DTYPE)
        model = self._new_model(x, y)
        if warm and not optimize and set_hyperparameters(model, warm):
            model.eval()
            return model
        self.optimized_ = True
        if subset is not None:
            idx = np.unique(np.asarray(subset, dtype=int))
            if 2 <= idx.size < len(X):
                sub = self._fit_scores(X[idx], scores[idx], warm, True, None)
                if set_hyperparameters(model, hyperparameters(sub)):
                    model.eval()
                    return model
        mll = ExactMarginalLogLikelihood(model.likelihood, model)
        if warm:
            default = hyperparameters(model)
            base = map_objective(mll)
            if set_hyperparameters(model, warm) and map_objective(mll) < base:
                set_hyperparameters(model, default)
        with torch.random.fork_rng(), warnings.catch_warnings():
            torch.manual_seed(self.seed)
            warnings.simplefilter("ignore")
            try:
                fit_gpytorch_mll(mll, optimizer_kwargs={"options": {"maxiter": self.max_iter}},
                                 max_attempts=self.max_fit_attempts)
            except Exception as exc:  # keep the starting hyperparameters
                warnings.warn(
                    f"emulator GP fit failed ({type(exc).__name__}: {exc}); using the initial "
                    "hyperparameters.", ConvergenceWarning, stacklevel=3)
        model.eval()
        return model

    def hyperparameters(self) -> dict[str, list[float]]:
        """Raw hyperparameters of the score GPs (JSON-ready; empty when ``k = 0``)."""
        if self.score_model_ is None:
            return {}
        from .search.surrogate import hyperparameters

        return hyperparameters(self.score_model_)

    # -------------------------------------------------------------- predict
    def _check_fitted(self) -> None:
        if not hasattr(self, "mean_"):
            raise InputDataError("OutputEmulator: call fit(X_unit, Y) before predicting.")

    @property
    def n_outputs(self) -> int:
        """Number of outputs ``m``."""
        self._check_fitted()
        return int(self.mean_.size)

    def posterior(self, X: Tensor) -> OutputPosterior:
        """Joint posterior of the outputs at ``X`` (torch, shape ``(..., q, d)``)."""
        self._check_fitted()
        X = torch.as_tensor(X, dtype=DTYPE)
        scores = None if self._gp is None else self._gp.predict(X)
        return OutputPosterior(scores, self._basis_t, self._mean_t, self._resid_sd_t,
                               X.shape[:-1])

    def predict(self, X_unit: Any) -> tuple[np.ndarray, np.ndarray]:
        """Marginal predictive mean and variance of the outputs.

        Parameters
        ----------
        X_unit : array_like of shape (k, d)

        Returns
        -------
        mean, var : ndarray of shape (k, m)
            In output units (and output units squared); ``var`` includes the
            residual variance of the discarded components.
        """
        X = torch.as_tensor(np.array(X_unit, dtype=float).reshape(-1, self.train_X_.shape[1]),
                            dtype=DTYPE)
        with torch.no_grad():
            post = self.posterior(X)
            return post.mean.numpy(), post.variance.numpy()

    def sample(self, X_unit: Any, n_samples: int, seed: int = 0) -> np.ndarray:
        """Joint draws of the outputs at ``X_unit`` (``(k, d)``): shape ``(n_samples, k, m)``."""
        X = torch.as_tensor(np.array(X_unit, dtype=float).reshape(-1, self.train_X_.shape[1]),
                            dtype=DTYPE)
        with torch.no_grad(), torch.random.fork_rng():
            torch.manual_seed(int(seed))
            return self.posterior(X).rsample(torch.Size([int(n_samples)])).numpy()

    def model(self) -> EmulatorModel:
        """This emulator as a botorch Model (for MC acquisition functions)."""
        self._check_fitted()
        return EmulatorModel(self)


_SQRT5 = 5.0**0.5


class _ScoreGP:
    """Exact GP prediction of the component scores with the fitted hyperparameters.

    The same numbers as ``score_model_.posterior`` (botorch/gpytorch; checked in
    the tests), computed directly (Rasmussen and Williams 2006, eq. 2.25-2.26,
    Matern 5/2 kernel eq. 4.17) with the training Cholesky factor cached: a
    few milliseconds per call where the general machinery takes tens.
    """

    def __init__(self, model: SingleTaskGP, k: int) -> None:
        with torch.no_grad():
            x = model.train_inputs[0]
            x = x if x.dim() == 3 else x.unsqueeze(0).expand(k, *x.shape)
            y = model.train_targets.reshape(k, -1)  # standardised scores
            self.ls = model.covar_module.lengthscale.detach().reshape(k, 1, -1)
            self.c = model.mean_module.constant.detach().reshape(k, 1)
            noise = model.likelihood.noise.detach().reshape(k, 1, 1)
            tf = model.outcome_transform
            if not isinstance(tf, Standardize):  # the emulator's GPs standardise their scores
                raise TypeError(f"expected a Standardize outcome transform; got {type(tf)}")
            self.mu = tf.means.detach().reshape(k)
            self.sd = tf.stdvs.detach().reshape(k)
            self.xs = x / self.ls  # (k, n, d)
            K = self._kernel(self.xs, self.xs) + noise * torch.eye(x.shape[-2], dtype=x.dtype)
            self.L = torch.linalg.cholesky(K)
            self.alpha = torch.cholesky_solve((y - self.c).unsqueeze(-1), self.L)  # (k, n, 1)
        self.k = k

    @staticmethod
    def _kernel(a: Tensor, b: Tensor) -> Tensor:
        d2 = (a.unsqueeze(-2) - b.unsqueeze(-3)).pow(2).sum(-1)
        r = _SQRT5 * d2.clamp_min(1e-30).sqrt()
        return (1.0 + r + r.pow(2) / 3.0) * torch.exp(-r)

    def predict(self, X: Tensor) -> tuple[Tensor, Tensor]:
        """Mean ``(..., q, k)`` and Cholesky factor ``(k, ..., q, q)`` of the scores."""
        batch, q, d = X.shape[:-2], X.shape[-2], X.shape[-1]
        xf = X.reshape(-1, d)  # (B q, d)
        xs = xf.unsqueeze(0) / self.ls  # (k, Bq, d)
        kx = self._kernel(xs, self.xs)  # (k, Bq, n)
        mean = self.c + (kx @ self.alpha).squeeze(-1)  # (k, Bq)
        v = torch.linalg.solve_triangular(self.L, kx.transpose(-1, -2), upper=False)  # (k,n,Bq)
        n_b = xf.shape[0] // q
        vb = v.reshape(self.k, -1, n_b, q).permute(0, 2, 1, 3)  # (k, B, n, q)
        xb = xs.reshape(self.k, n_b, q, d)
        prior = self._kernel(xb, xb)  # (k, B, q, q)
        cov = prior - vb.transpose(-1, -2) @ vb
        cov = 0.5 * (cov + cov.transpose(-1, -2))
        sd2 = self.sd.pow(2).reshape(self.k, 1, 1, 1)
        cov = cov * sd2
        jitter = 1e-10 * sd2 * torch.eye(q, dtype=X.dtype)
        eye_diag = torch.diagonal(cov, dim1=-2, dim2=-1).clamp_min(0.0)
        if q == 1:
            chol = eye_diag.sqrt().unsqueeze(-1)
        else:
            chol = torch.linalg.cholesky_ex(cov + jitter)[0]
            bad = ~torch.isfinite(chol).all(-1).all(-1)
            if bad.any():  # numerically indefinite: fall back to the marginal variances
                chol = torch.where(bad[..., None, None], torch.diag_embed(eye_diag.sqrt()), chol)
        mean = (mean * self.sd.reshape(self.k, 1) + self.mu.reshape(self.k, 1))
        mean = mean.transpose(0, 1).reshape(*batch, q, self.k)
        return mean, chol.reshape(self.k, *batch, q, q)


class OutputPosterior(Posterior):
    """Posterior of emulated outputs: affine map of the score-GP posterior plus residual noise.

    Samples have shape ``sample_shape + batch + (q, m)``. Base samples have
    shape ``batch + (q, k + m)``: the first ``k`` columns drive the score GPs
    (joint over the ``q`` points), the last ``m`` the independent residual
    noise.
    """

    def __init__(self, scores: tuple[Tensor, Tensor] | None, basis: Tensor, mean: Tensor,
                 residual_sd: Tensor, batch_q_shape: torch.Size) -> None:
        self.scores = scores
        self.basis = basis
        self.offset = mean
        self.residual_sd = residual_sd
        self._batch_q = torch.Size(batch_q_shape)

    @property
    def _k(self) -> int:
        return int(self.basis.shape[0])

    @property
    def _m(self) -> int:
        return int(self.offset.shape[0])

    @property
    def device(self) -> torch.device:
        return self.offset.device

    @property
    def dtype(self) -> torch.dtype:
        return self.offset.dtype

    @property
    def base_sample_shape(self) -> torch.Size:
        return self._batch_q + torch.Size([self._k + self._m])

    @property
    def batch_range(self) -> tuple[int, int]:
        return (0, -2)

    def _extended_shape(self, sample_shape: torch.Size = torch.Size()) -> torch.Size:  # noqa: B008
        return torch.Size(sample_shape) + self._batch_q + torch.Size([self._m])

    @property
    def mean(self) -> Tensor:
        out = self.offset.expand(self._batch_q + torch.Size([self._m]))
        if self.scores is not None:
            out = out + self.scores[0] @ self.basis
        return out

    @property
    def variance(self) -> Tensor:
        out = (self.residual_sd**2).expand(self._batch_q + torch.Size([self._m]))
        if self.scores is not None:
            var = self.scores[1].pow(2).sum(-1)  # (k, ..., q)
            out = out + var.movedim(0, -1) @ self.basis**2
        return out

    def rsample_from_base_samples(self, sample_shape: torch.Size, base_samples: Tensor) -> Tensor:
        k = self._k
        out = self.offset + base_samples[..., k:] * self.residual_sd
        if self.scores is not None:
            mean, chol = self.scores  # (..., q, k), (k, ..., q, q)
            eps = base_samples[..., :k].movedim(-1, 0)  # (k, s..., ..., q)
            n_s = eps.dim() - chol.dim() + 1
            chol = chol.reshape(chol.shape[:1] + (1,) * n_s + chol.shape[1:])
            draws = (chol @ eps.unsqueeze(-1)).squeeze(-1).movedim(0, -1)  # (s..., ..., q, k)
            out = out + (mean + draws) @ self.basis
        return out

    def rsample(self, sample_shape: torch.Size | None = None) -> Tensor:
        sample_shape = torch.Size([1]) if sample_shape is None else torch.Size(sample_shape)
        base = torch.randn(sample_shape + self.base_sample_shape, dtype=self.dtype,
                           device=self.device)
        return self.rsample_from_base_samples(sample_shape, base)


class EmulatorModel(Model):
    """A fitted :class:`OutputEmulator` as a botorch Model with ``m`` outputs.

    Only what MC acquisition functions need: :meth:`posterior` (no
    conditioning on fantasies). ``observation_noise`` is ignored: the
    emulator's variance already holds the residual of discarded components.
    """

    def __init__(self, emulator: OutputEmulator) -> None:
        super().__init__()
        self.emulator = emulator
        self._num_outputs = emulator.n_outputs

    @property
    def num_outputs(self) -> int:
        return self._num_outputs

    @property
    def batch_shape(self) -> torch.Size:
        return torch.Size()

    def posterior(self, X: Tensor, output_indices: list[int] | None = None,
                  observation_noise: bool | Tensor = False, posterior_transform: Any = None,
                  **kwargs: Any) -> Posterior:
        if output_indices is not None or posterior_transform is not None:
            raise NotImplementedError("EmulatorModel: output_indices and posterior_transform "
                                      "are not supported; map samples with an MC objective.")
        return self.emulator.posterior(X)

    def subset_output(self, idcs: list[int]) -> Model:  # pragma: no cover - not used
        raise NotImplementedError("EmulatorModel does not subset outputs.")

