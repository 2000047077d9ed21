r"""Composite Bayesian optimisation: expected improvement of the misfit of emulated outputs.

The calibration misfit is a known function (the chi-square of
:mod:`profshape.likelihood`) of the forward model's outputs, and those
outputs vary far more smoothly with the coefficients than the misfit does.
Composite Bayesian optimisation (Astudillo and Frazier 2019, "Bayesian
optimization of composite functions", ICML) models the outputs (here with
:class:`profshape.emulator.OutputEmulator`: a reduced basis of the outputs
with a GP per component score) and proposes by the Monte-Carlo expected
improvement of the misfit *computed from samples of the outputs*:

.. math::

    \mathrm{EI}(x) = E\left[\max\{\chi^2_\mathrm{best} - \chi^2(y(x)), 0\}\right],
    \qquad y(x) \sim \text{emulator},

estimated with quasi-Monte-Carlo samples (:class:`botorch.sampling.SobolQMCNormalSampler`)
in its numerically robust log form (:class:`botorch.acquisition.logei.qLogExpectedImprovement`,
Ament et al. 2023) with a :class:`~botorch.acquisition.objective.GenericMCObjective`
that evaluates :meth:`profshape.output_layout.OutputLayout.chi2` on each
sample (the deviance ``-2 ln L`` when a discrepancy sigma is fitted; see
:func:`composite_misfit`); ``chi2_best`` is the best value actually observed. Running trials
enter as pending points (their joint samples), a batch is built greedily one
point at a time. Once a forward run has failed, the log acquisition is added
to the log probability of a successful run under the feasibility GP (Gardner
et al. 2014, as in :mod:`profshape.search.acquisition`).

The acquisition is maximised with multi-start L-BFGS-B
(:func:`botorch.optim.optimize_acqf`) from the best of a screening set made
of scrambled Sobol points over the box and Gaussian perturbations of the best
trials (standard deviations 0.1 and 0.02 of the cube; common practice, no
source), so the refinement of the current basin and the search of the whole
cube compete for every proposal.

A second kind of proposal keeps the search from locking onto the first basin
it finds: after every ``stall`` model-based proposals without improving the
best trial (``max(3, d)``; our choice), one proposal maximises the same
expected improvement over Sobol points at least a quarter of the cube's
diagonal away from the best trial (kind ``"explore"``): the most promising
point of another basin, as the emulator sees it.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import torch
from botorch.acquisition import AcquisitionFunction
from botorch.acquisition.logei import qLogExpectedImprovement
from botorch.acquisition.objective import GenericMCObjective
from botorch.models import SingleTaskGP
from botorch.optim import optimize_acqf
from botorch.sampling import SobolQMCNormalSampler
from scipy.stats import qmc
from torch import Tensor

from ..emulator import OutputEmulator
from ..output_layout import OutputLayout
from .acquisition import quiet_seeded
from .surrogate import DTYPE, FEASIBILITY_THRESHOLD

__all__ = [
    "COMPOSITE",
    "EXPLORE",
    "CompositeAcquisition",
    "composite_acquisition",
    "composite_misfit",
    "fit_emulator",
    "propose_composite",
    "stall_length",
]

COMPOSITE = "composite"
EXPLORE = "explore"

#: Emulator settings of the search: 99.9 % of the variance, and a residual of at most
#: 0.1 sigma rms per value (outputs scaled by their measurement sigma), at most 12 GPs.
VARIANCE_FRACTION = 0.999
RESIDUAL_TOLERANCE = 0.01
MAX_COMPONENTS = 12
#: Hyperparameters are re-optimised while the training set is small, then each time it has
#: grown by a tenth since the last optimisation (in between the GPs are conditioned on the
#: new runs with the previous hyperparameters); common practice, no source.
FULL_REFIT_BELOW = 20
REFIT_GROWTH = 1.1
#: Beyond this many trials the hyperparameters are optimised on this many: the best half
#: by chi-square and an evenly spread selection of the rest (then every trial is used for
#: prediction); bounds the cost of a fit at a few seconds.
HYPER_SUBSET = 80
#: Minimum unit-cube distance of an "explore" proposal from the best trial, as a fraction
#: of the cube's diagonal.
EXPLORE_DISTANCE = 0.25


def composite_misfit(layout: OutputLayout, Y: Any, X: Any) -> Any:
    """The misfit the composite strategy minimises, for outputs ``Y`` at unit-cube ``X``.

    The chi-square; with a fitted discrepancy sigma (a coordinate of ``X``) the
    deviance ``-2 ln L`` instead, since the chi-square alone falls without end as
    the discrepancy grows. ``Y`` and ``X`` are numpy arrays or torch tensors (of
    shapes ``(..., m)`` and ``(..., d)``); the result has the same kind, of shape ``(...)``.
    """
    disc = layout.discrepancy_from_unit(X)
    if disc is None:
        return layout.chi2(Y)
    return -2.0 * layout.log_likelihood(Y, discrepancy_sigma_m_s=disc)


def stall_length(dim: int) -> int:
    """Model-based proposals without improvement before an ``"explore"`` one: ``max(3, d)``."""
    return max(3, int(dim))


def fit_emulator(u: np.ndarray, Y: np.ndarray, layout: OutputLayout, *, seed: int,
                 warm: Mapping[str, Sequence[float]] | None, refit: bool,
                 max_attempts: int = 2) -> OutputEmulator:
    """Fit the search's emulator to the successful trials.

    Parameters
    ----------
    u, Y : ndarray of shapes (n, d) and (n, m)
        Unit-cube points and output vectors (:meth:`OutputLayout.vector`).
    layout : OutputLayout
        Gives the output scales (measurement sigma).
    seed : int
    warm : dict, optional
        Hyperparameters of the previous fit.
    refit : bool
        Optimise the hyperparameters (from ``warm`` when it fits); ``False``
        loads ``warm`` and only conditions on the data (when the number of
        components matches, else a full fit).
    """
    em = OutputEmulator(VARIANCE_FRACTION, MAX_COMPONENTS, RESIDUAL_TOLERANCE,
                        max_fit_attempts=max_attempts, max_iter=100, seed=seed)
    subset = None
    if len(u) > HYPER_SUBSET:
        order = np.argsort(np.asarray(composite_misfit(layout, Y, u)), kind="stable")
        best, rest = order[: HYPER_SUBSET // 2], np.sort(order[HYPER_SUBSET // 2:])
        spread = rest[np.linspace(0, len(rest) - 1, HYPER_SUBSET - len(best)).astype(int)]
        subset = np.concatenate([best, spread])
    warm_start: dict[str, Sequence[float]] | None = None if warm is None else dict(warm)
    em.fit(u, Y, scale=layout.scale, warm_start=warm_start, optimize=refit,
           hyper_subset=subset)
    return em


class CompositeAcquisition(AcquisitionFunction):
    """Log expected improvement of the composite misfit, times the success probability.

    Parameters
    ----------
    log_ei : qLogExpectedImprovement
        On the emulator model with the chi-square objective.
    feasibility : SingleTaskGP or None
        Failure-indicator GP; its probability of success (below
        :data:`FEASIBILITY_THRESHOLD`) of each of the ``q`` points multiplies the
        improvement.
    """

    def __init__(self, log_ei: qLogExpectedImprovement,
                 feasibility: SingleTaskGP | None = None) -> None:
        super().__init__(model=log_ei.model)
        self.log_ei = log_ei
        self.feasibility = feasibility

    def set_X_pending(self, X_pending: Tensor | None = None) -> None:
        self.log_ei.set_X_pending(X_pending)

    # botorch declares X_pending a plain attribute; a settable property stands in for it
    @property  # type: ignore[override]
    def X_pending(self) -> Tensor | None:
        return self.log_ei.X_pending

    @X_pending.setter
    def X_pending(self, value: Tensor | None) -> None:
        pass  # managed by log_ei (AcquisitionFunction.__init__ assigns None)

    def forward(self, X: Tensor) -> Tensor:
        val = self.log_ei(X)
        if self.feasibility is not None:
            post = self.feasibility.posterior(X)
            mean = post.mean[..., 0]
            sd = post.variance[..., 0].clamp_min(1e-12).sqrt()
            z = (FEASIBILITY_THRESHOLD - mean) / sd
            val = val + torch.special.log_ndtr(z).sum(-1)
        return val


def composite_acquisition(emulator: OutputEmulator, layout: OutputLayout, best_chi2: float,
                          *, pending_u: np.ndarray | None,
                          feasibility: SingleTaskGP | None = None,
                          mc_samples: int = 128, seed: int = 0) -> CompositeAcquisition:
    """The composite log expected improvement (see the module docstring)."""

    def neg_chi2(samples: Tensor, X: Tensor | None = None) -> Tensor:
        if X is None or layout.discrepancy_index is None:
            return -layout.chi2(samples)
        return -composite_misfit(layout, samples, X)

    pending = None
    if pending_u is not None and len(pending_u):
        pending = torch.as_tensor(np.asarray(pending_u, dtype=float), dtype=DTYPE)
    log_ei = qLogExpectedImprovement(
        emulator.model(), best_f=-float(best_chi2),
        sampler=SobolQMCNormalSampler(torch.Size([mc_samples]), seed=seed),
        objective=GenericMCObjective(neg_chi2), X_pending=pending,
    )
    return CompositeAcquisition(log_ei, feasibility)


def _screening_points(dim: int, u_best: np.ndarray, n: int, seed: int,
                      box: np.ndarray) -> np.ndarray:
    """Sobol points over ``box`` and perturbations of the best trials (clipped to the box)."""
    rng = np.random.default_rng(seed)
    n_sobol = n - n // 2
    lo, hi = box
    sob = lo + (hi - lo) * qmc.Sobol(dim, scramble=True, seed=seed).random(n_sobol)
    n_local = n - n_sobol
    centres = u_best[rng.integers(0, len(u_best), n_local)]
    sd = np.where(np.arange(n_local)[:, None] % 2 == 0, 0.1, 0.02)
    local = np.clip(centres + sd * rng.normal(size=(n_local, dim)), lo, hi)
    return np.vstack([sob, local])


def _evaluate(acq: AcquisitionFunction, pts: np.ndarray, chunk: int = 256) -> np.ndarray:
    out = []
    with torch.no_grad():
        for i in range(0, len(pts), chunk):
            x = torch.as_tensor(pts[i:i + chunk, None, :], dtype=DTYPE)
            out.append(acq(x).numpy())
    return np.concatenate(out)


def propose_composite(acq: CompositeAcquisition, dim: int, q: int, *, u_ok: np.ndarray,
                      chi2_ok: np.ndarray, num_restarts: int, raw_samples: int, seed: int,
                      kind: str = COMPOSITE, bounds: np.ndarray | None = None) -> np.ndarray:
    """Maximise the composite acquisition for ``q`` points (greedy, one at a time).

    ``kind="explore"`` screens only Sobol points far from the best trial
    (:data:`EXPLORE_DISTANCE`) and takes the best of them, unrefined.

    Returns
    -------
    ndarray of shape (q, dim)
    """
    box = np.array([np.zeros(dim), np.ones(dim)]) if bounds is None else np.asarray(bounds)
    order = np.argsort(chi2_ok)
    top = u_ok[order[: max(1, min(5, len(order)))]]
    base_pending = acq.X_pending
    chosen: list[np.ndarray] = []
    for i in range(q):
        s = (seed + 7919 * i) % 2**31
        if chosen:
            extra = torch.as_tensor(np.array(chosen), dtype=DTYPE)
            acq.set_X_pending(extra if base_pending is None else torch.cat([base_pending, extra]))
        if kind == EXPLORE:
            pts = box[0] + (box[1] - box[0]) * qmc.Sobol(dim, scramble=True, seed=s).random(
                max(4 * raw_samples, 512))
            far = np.linalg.norm(pts - top[0], axis=1) >= EXPLORE_DISTANCE * math.sqrt(dim)
            pts = pts[far] if far.any() else pts
            vals = _evaluate(acq, pts)
            chosen.append(pts[int(np.argmax(vals))])
            continue
        pts = _screening_points(dim, top, raw_samples, s, box)
        vals = _evaluate(acq, pts)
        vals = np.where(np.isfinite(vals), vals, -np.inf)
        start = pts[np.argsort(-vals)[:num_restarts]]
        with quiet_seeded(s):
            cand, _ = optimize_acqf(
                acq, bounds=torch.as_tensor(box, dtype=DTYPE), q=1, num_restarts=len(start),
                batch_initial_conditions=torch.as_tensor(start[:, None, :], dtype=DTYPE),
                options={"maxiter": 60},
            )
        chosen.append(cand.detach().numpy().reshape(dim))
    acq.set_X_pending(base_pending)
    return np.clip(np.array(chosen), 0.0, 1.0)
