r"""The posterior's target on the output emulator, honest about the emulator.

The forward model's outputs at the measured positions (and the measured
scalars) are emulated by :class:`profshape.emulator.OutputEmulator`, with
predictive mean :math:`m(\theta)` and variance :math:`v(\theta)` per value.
The emulator's uncertainty enters the likelihood as extra variance, as in
Kennedy and O'Hagan (2001, JRSS B 63:425) and Higdon et al. (2008, JASA
103:570):

.. math::

    \ln L_\mathrm{em}(\theta) = \sum_i w_i \left[-\frac{(y_i - m_i)^2}{2 (s_i^2 + v_i)}
        - \tfrac12 \ln 2\pi (s_i^2 + v_i)\right],

the marginal likelihood of the data with the emulated outputs integrated out
(exact for independent Gaussian output errors), so where the emulator is
unsure the posterior widens instead of trusting a guess.

Its *stated error of the log-likelihood* of a real run, used for the
predictive check and for refinement, is the spread of the real-run
log-likelihood :math:`\ln L(y_\mathrm{run})` over joint emulator draws of
the outputs (Monte Carlo over :data:`N_ERROR_DRAWS` draws).

For speed the sampler uses a numpy transcription of the batched score GPs'
posterior mean and variance (Rasmussen and Williams 2006, eqs. 2.25-2.26),
checked against botorch's posterior in the tests.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from scipy import linalg

from ..exceptions import InputDataError
from .protocol import PosteriorProblem

__all__ = ["EmulatorTarget", "emulator_training_set"]

#: Joint emulator draws per point for the stated error of the log-likelihood.
N_ERROR_DRAWS = 64
#: Most L-BFGS iterations of a warm-started refit (common practice, no source).
REFIT_MAX_ITER = 60
#: Most hyper-parameter optimisations per posterior; later refits condition the score
#: GPs on the new runs with the last hyper-parameters (common practice, no source: a
#: few runs where the mass sits move the hyper-parameters little).
MAX_OPTIMISED_FITS = 2


def _matern52_batch(x1: np.ndarray, x2: np.ndarray, lengthscale: np.ndarray) -> np.ndarray:
    """Matern 5/2 correlations, one per component: (k, n1, n2) for lengthscale (k, d)."""
    a = x1[None, :, :] / lengthscale[:, None, :]
    b = x2[None, :, :] / lengthscale[:, None, :]
    sq = (a * a).sum(-1)[:, :, None] + (b * b).sum(-1)[:, None, :] - 2.0 * a @ b.transpose(0, 2, 1)
    r = np.sqrt(np.maximum(sq, 0.0))
    s5r = np.sqrt(5.0) * r
    return (1.0 + s5r + 5.0 / 3.0 * r * r) * np.exp(-s5r)


class _ScorePredictor:
    """Posterior mean and variance of the batched score GPs, in numpy."""

    def __init__(self, model: Any, k: int) -> None:
        # a batch of k GPs (k > 1) or a single GP (k = 1), on the same inputs
        x = model.train_inputs[0].detach().cpu().numpy()
        self.x = x[0] if x.ndim == 3 else x  # (n, d)
        y = model.train_targets.detach().cpu().numpy().reshape(k, -1)  # standardised
        self.lengthscale = model.covar_module.lengthscale.detach().cpu().numpy().reshape(k, -1)
        self.constant = np.broadcast_to(
            model.mean_module.constant.detach().cpu().numpy().reshape(-1), (k,)).copy()
        noise = np.broadcast_to(model.likelihood.noise.detach().cpu().numpy().reshape(-1),
                                (k,)).copy()
        tf = model.outcome_transform
        self.y_mean = tf.means.detach().cpu().numpy().reshape(k)
        self.y_std = tf.stdvs.detach().cpu().numpy().reshape(k)
        kxx = _matern52_batch(self.x, self.x, self.lengthscale)
        kxx = kxx + noise[:, None, None] * np.eye(len(self.x))[None]
        chol = np.linalg.cholesky(kxx)
        resid = y - self.constant[:, None]
        self.alpha = np.stack([linalg.cho_solve((chol[c], True), resid[c])
                               for c in range(len(resid))])
        self.chol = chol

    def __call__(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        ks = _matern52_batch(u, self.x, self.lengthscale)  # (k, q, n)
        mean = self.constant[:, None] + np.einsum("kqn,kn->kq", ks, self.alpha)
        # triangular solves with the cached Cholesky factor (stable for a tiny noise floor)
        v = np.stack([linalg.solve_triangular(self.chol[c], ks[c].T, lower=True,
                                              check_finite=False) for c in range(len(ks))])
        var = np.maximum(1.0 - np.einsum("knq,knq->kq", v, v), 0.0)
        return ((mean * self.y_std[:, None] + self.y_mean[:, None]).T,
                (var * self.y_std[:, None] ** 2).T)  # (q, k)


def predictions_from_json(text: Any) -> dict[str, Any]:
    """The ok predictions of a trial-log ``predictions`` cell (JSON), by label."""
    import json

    from ..forward.base import Prediction

    if not isinstance(text, str) or not text:
        return {}
    try:
        payload = json.loads(text)
    except ValueError:
        return {}
    out = {}
    for label, p in (payload.items() if isinstance(payload, dict) else []):
        if not isinstance(p, dict) or p.get("status", "ok") != "ok":
            continue
        z, v = p.get("z_m"), p.get("ion_velocity_m_s")
        out[label] = Prediction("ok", None if not z else np.asarray(z, dtype=float),
                                None if not v else np.asarray(v, dtype=float),
                                {k: float(x) for k, x in (p.get("scalars") or {}).items()},
                                profiles={k: np.asarray(x, dtype=float)  # potential, ...
                                          for k, x in (p.get("profiles") or {}).items()})
    return out


def emulator_training_set(problem: PosteriorProblem, trials: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Unit-cube coordinates and output vectors of the ok trials that stored their predictions.

    Returns empty arrays when the trial log has no usable ``predictions``
    column (then the log-likelihood surrogate is the only choice).
    """
    from ..output_layout import OutputLayout

    layout = OutputLayout.from_problem(problem)
    names = list(problem.names)
    if "predictions" not in trials.columns or "status" not in trials.columns:
        return np.zeros((0, len(names))), np.zeros((0, layout.n_outputs))
    ok = trials[trials["status"].astype(str) == "ok"]
    ucols = [f"u__{n}" for n in names]
    xs, ys = [], []
    for _, row in ok.iterrows():
        preds = predictions_from_json(row["predictions"])
        try:
            y = layout.vector(preds)
        except InputDataError:
            continue
        if not np.all(np.isfinite(y)):
            continue
        if all(c in row.index for c in ucols):
            u = row[ucols].to_numpy(dtype=float)
        else:
            u = np.asarray(problem.to_unit(row[names].to_numpy(dtype=float)), dtype=float)
        if np.all(np.isfinite(u)):
            xs.append(np.clip(u, 0.0, 1.0))
            ys.append(y)
    if not xs:
        return np.zeros((0, len(names))), np.zeros((0, layout.n_outputs))
    return np.array(xs), np.array(ys)


class EmulatorTarget:
    """Variance-inflated log-likelihood through the output emulator (see the module docstring).

    Parameters
    ----------
    problem : CalibrationProblem
    x_unit, outputs : ndarray
        Training runs (unit cube) and their output vectors
        (:func:`emulator_training_set`).
    seed : int, default=0
    """

    kind = "emulator"

    def __init__(self, problem: PosteriorProblem, x_unit: np.ndarray, outputs: np.ndarray,
                 seed: int = 0) -> None:
        from ..output_layout import OutputLayout

        self.layout = OutputLayout.from_problem(problem)
        if len(x_unit) < problem.dim + 2:
            raise InputDataError(
                f"emulator: {len(x_unit)} trials with stored predictions; the posterior needs at "
                f"least d + 2 = {problem.dim + 2}.")
        self.x = np.asarray(x_unit, dtype=float)
        self.y = np.asarray(outputs, dtype=float)
        self.seed = int(seed)
        self.emulator: Any = None
        self.n_fits = 0
        self.n_optimised_fits = 0
        self._rng = np.random.default_rng(seed)

    # -------------------------------------------------------------- data
    def add(self, u: np.ndarray, runs: list[Any]) -> None:
        """Append forward runs (their outputs) to the training set."""
        for ui, run in zip(np.atleast_2d(u), runs, strict=True):
            if not run.ok:
                continue
            try:
                y = self.layout.vector(run.predictions)
            except InputDataError:
                continue
            if np.all(np.isfinite(y)):
                self.x = np.vstack([self.x, np.clip(ui, 0.0, 1.0)[None, :]])
                self.y = np.vstack([self.y, y[None, :]])

    def fit(self, u: np.ndarray | None = None, ll: np.ndarray | None = None) -> None:
        """(Re)fit the emulator on the stored runs.

        Refits start from the last fit's hyper-parameters, are capped at
        :data:`REFIT_MAX_ITER` iterations, and after :data:`MAX_OPTIMISED_FITS`
        optimisations only condition on the new runs.
        """
        from ..emulator import OutputEmulator

        warm = None if self.emulator is None else self.emulator.hyperparameters()
        em = OutputEmulator(seed=self.seed,
                            **({} if warm is None else {"max_iter": REFIT_MAX_ITER,
                                                        "max_fit_attempts": 1}))
        # duplicates make the score GPs' kernel matrix singular
        _, keep = np.unique(np.round(self.x, 12), axis=0, return_index=True)
        keep = np.sort(keep)
        optimise = warm is None or self.n_optimised_fits < MAX_OPTIMISED_FITS
        self.emulator = em.fit(self.x[keep], self.y[keep], scale=self.layout.scale,
                               warm_start=warm or None, optimize=optimise)
        self.n_optimised_fits += int(bool(em.optimized_))
        self._scores = (None if em.score_model_ is None
                        else _ScorePredictor(em.score_model_, em.n_components_))
        self._basis = em.basis_ * em.scale_  # (k, m)
        self.n_fits += 1

    # ----------------------------------------------------------- predict
    def outputs(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Emulated output mean and variance (numpy), shapes (n, m)."""
        u2 = np.atleast_2d(np.asarray(u, dtype=float))
        em = self.emulator
        mean = np.broadcast_to(em.mean_, (len(u2), em.mean_.size)).copy()
        var = np.broadcast_to(em.residual_variance_, mean.shape).copy()
        if self._scores is not None:
            s_mean, s_var = self._scores(u2)
            mean += s_mean @ self._basis
            var += s_var @ self._basis**2
        return mean, var

    def _discrepancy(self, u: np.ndarray) -> Any:
        return self.layout.discrepancy_from_unit(np.atleast_2d(u))

    def mean(self, u: np.ndarray) -> np.ndarray:
        """The variance-inflated log-likelihood [nats] (the sampler's target)."""
        m, v = self.outputs(u)
        return self.layout.log_likelihood(m, self._discrepancy(u),
                                          extra_variance=v[:, : self.layout.n_values])

    def predict(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Expected real-run log-likelihood and its stated error [nats], by joint emulator draws."""
        import torch

        u2 = np.atleast_2d(np.asarray(u, dtype=float))
        with torch.no_grad(), torch.random.fork_rng():
            torch.manual_seed(int(self._rng.integers(2**31)))
            x = torch.as_tensor(u2[:, None, :], dtype=torch.float64)  # one point per batch
            draws = self.emulator.posterior(x).rsample(torch.Size([N_ERROR_DRAWS]))
        y = draws.numpy()[:, :, 0, :]  # (S, n, m)
        disc = self._discrepancy(u2)
        ll = self.layout.log_likelihood(y, None if disc is None else disc[None, :])
        return ll.mean(axis=0), ll.std(axis=0, ddof=1)

    def targets(self, n: int, rng: np.random.Generator) -> tuple[list, list[int]]:
        return [self.mean] * n, [-1] * n

    def info(self) -> dict[str, Any]:
        em = self.emulator
        return {"n_components": int(em.n_components_),
                "explained_fraction": float(em.explained_fraction_),
                "n_training_runs": len(em.train_X_),
                "n_fits": self.n_fits, "n_optimised_fits": self.n_optimised_fits,
                "n_outputs": int(em.mean_.size)}
