r"""The forward model's outputs as one vector, and the misfit computed from such vectors.

:class:`OutputLayout` fixes the order of the outputs that the emulator
(:class:`profshape.emulator.OutputEmulator`) models for a data set: for each
operating point, in the data set's order, the ion velocity at the measured
positions (measurement order), then each other profile observable at its
measured positions (the data's order), and then the scalars (the data's order);
when the position uncertainty is used (``LikelihoodSettings.use_position_uncertainty``
and a ``sigma_z_m`` column), the model's slope (``du/dz`` and alike for the other profiles) at those positions
follows, for all points, after all the values. That is exactly what
:func:`profshape.likelihood.evaluate_misfit` uses of a prediction, so the
vectorised misfit here is the same number:
:meth:`OutputLayout.chi2` of :meth:`OutputLayout.vector` equals
``evaluate_misfit(...).chi2`` (checked in ``tests/search/test_emulator.py``).

The misfit rules are those of :mod:`profshape.likelihood` (effective variance
with the position uncertainty through the model's slope, Orear 1982; model
discrepancy in quadrature; per-observable weights), written once more for
arrays of shape ``(..., m)`` of numpy or torch (so they run on Monte-Carlo
samples of emulated outputs, differentiably), with an optional
``extra_variance`` of shape ``(..., n_values)`` added to the data variance of
each value (the emulator's predictive variance, Kennedy and O'Hagan 2001).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import torch

from .data import DataSet
from .exceptions import InputDataError
from .forward.base import Prediction
from .likelihood import LikelihoodSettings

__all__ = ["OutputColumn", "OutputLayout"]

_LOG_2PI = math.log(2.0 * math.pi)

VALUE = "value"
SLOPE = "slope"


@dataclass(frozen=True)
class OutputColumn:
    """One output: ``label``, ``observable`` (a profile observable such as
    ``"ion_velocity"``, or a scalar name), ``kind`` (``"value"`` or ``"slope"``
    [unit per m]) and position ``z_m`` (NaN for scalars)."""

    label: str
    observable: str
    kind: str
    z_m: float


class OutputLayout:
    """Order of the emulated outputs of a data set, and the misfit of output vectors.

    Parameters
    ----------
    dataset : DataSet
    likelihood : LikelihoodSettings, optional
    discrepancy_index : int, optional
        Position of a fitted ``log10`` discrepancy sigma among the unit-cube
        coordinates (``CalibrationProblem.fit_discrepancy``).
    discrepancy_log10_bounds : (float, float), optional
        Its bounds in log10(m/s).

    Attributes
    ----------
    columns : tuple of OutputColumn
        The ``m`` outputs in order.
    n_outputs : int
        ``m``.
    n_values : int
        Number of measured values (the first ``n_values`` columns; equals
        ``dataset.n_data``).
    observed, sigma : ndarray of shape (n_values,)
        Measured values and their sigma (SI units).
    scale : ndarray of shape (m,)
        A natural scale per output for :meth:`OutputEmulator.fit`: the
        measurement sigma for values, ``sigma / sigma_z`` for slopes (the
        slope change that moves the effective sigma by about one sigma).
    """

    def __init__(self, dataset: DataSet, likelihood: LikelihoodSettings | None = None, *,
                 discrepancy_index: int | None = None,
                 discrepancy_log10_bounds: tuple[float, float] | None = None) -> None:
        if not isinstance(dataset, DataSet):
            raise InputDataError(f"OutputLayout: dataset must be a DataSet; got "
                                 f"{type(dataset).__name__}.")
        self.dataset = dataset
        self.likelihood = likelihood or LikelihoodSettings()
        s = self.likelihood
        values: list[OutputColumn] = []
        slopes: list[OutputColumn] = []
        obs, sig, wts, is_vel, sz = [], [], [], [], []
        slope_of = []  # value index of each slope column
        from .likelihood import measured_profiles

        for data in dataset:
            lab = data.label
            for name, zs, vals, sigmas, sigz in measured_profiles(data):
                use_z = s.use_position_uncertainty and sigz is not None
                disc = 0.0 if name == "ion_velocity" else s.profile_discrepancy_sigma(name)
                for i, z in enumerate(zs):
                    if use_z:
                        slopes.append(OutputColumn(lab, name, SLOPE, float(z)))
                        slope_of.append(len(values))
                    values.append(OutputColumn(lab, name, VALUE, float(z)))
                    obs.append(float(vals[i]))
                    sig.append(math.hypot(float(sigmas[i]), disc))  # discrepancy of other profiles
                    wts.append(s.weight(lab, name))
                    is_vel.append(name == "ion_velocity")
                    sz.append(float(sigz[i]) if sigz is not None and use_z else 0.0)
            for name, sc in data.scalars.items():
                values.append(OutputColumn(lab, name, VALUE, math.nan))
                obs.append(float(sc.value))
                sig.append(math.sqrt(s.scalar_variance(name, sc.value, sc.sigma)))
                wts.append(s.weight(lab, name))
                is_vel.append(False)
                sz.append(0.0)
        self.columns = tuple(values + slopes)
        self.n_values = len(values)
        self.n_outputs = len(self.columns)
        self.observed = np.array(obs)
        self.sigma = np.array(sig)  # all but the ion velocity: their discrepancy included
        self.weights = np.array(wts)
        self.is_velocity = np.array(is_vel, dtype=bool)
        self.sigma_z = np.array(sz)
        self.slope_of = np.array(slope_of, dtype=int)
        slope_scale = [self.sigma[j] / max(self.sigma_z[j], 1e-300) for j in slope_of]
        self.scale = np.concatenate([self.sigma, np.array(slope_scale)]) if slope_of else \
            self.sigma.copy()
        self.discrepancy_index = discrepancy_index
        self.discrepancy_log10_bounds = (None if discrepancy_log10_bounds is None
                                         else tuple(float(b) for b in discrepancy_log10_bounds))
        self._torch: dict[str, torch.Tensor] = {}
        #: Fitted parameters counted by :meth:`dof` (set by :meth:`from_problem`).
        self.n_fitted: int | None = None

    @classmethod
    def from_problem(cls, problem: Any) -> OutputLayout:
        """The layout of a :class:`~profshape.problem.CalibrationProblem` (its data,
        likelihood settings and fitted discrepancy, if any)."""
        index = bounds = None
        if getattr(problem, "fit_discrepancy", False):
            from .problem import DISCREPANCY_NAME

            index = problem.names.index(DISCREPANCY_NAME)
            bounds = tuple(problem.bounds[index])
        layout = cls(problem.dataset, problem.likelihood, discrepancy_index=index,
                     discrepancy_log10_bounds=bounds)
        layout.n_fitted = int(problem.n_fitted)
        return layout

    # ------------------------------------------------------------ vectors
    def vector(self, predictions: Mapping[str, Prediction]) -> np.ndarray:
        """The output vector ``(m,)`` of one trial's predictions (one per point).

        Raises
        ------
        InputDataError
            If a prediction is missing, failed, lacks an observed quantity or
            does not cover the measured positions (such a trial has no misfit
            either: it is a failed trial).
        """
        from .likelihood import measured_profiles

        vals: list[float] = []
        slopes: list[float] = []
        for data in self.dataset:
            lab = data.label
            pred = predictions.get(lab)
            if pred is None or not pred.ok:
                why = "missing" if pred is None else f"{pred.status}: {pred.reason}"
                raise InputDataError(f"OutputLayout.vector: point {lab}: prediction {why}.")
            for name, zs, _v, _s, sigz in measured_profiles(data):
                ug = pred.profile(name)
                if pred.z_m is None or ug is None:
                    raise InputDataError(f"OutputLayout.vector: point {lab}: no {name} "
                                         "prediction.")
                zg = pred.z_m
                tol = 1e-9 * max(abs(zg[-1] - zg[0]), 1e-12)
                if zs[0] < zg[0] - tol or zs[-1] > zg[-1] + tol:
                    raise InputDataError(f"OutputLayout.vector: point {lab}: the prediction does "
                                         f"not cover the measured {name} positions.")
                vals.extend(np.interp(zs, zg, ug).tolist())
                if self.likelihood.use_position_uncertainty and sigz is not None:
                    slopes.extend(np.interp(zs, zg, np.gradient(ug, zg)).tolist())
            for name in data.scalars:
                if name not in pred.scalars:
                    raise InputDataError(f"OutputLayout.vector: point {lab}: no {name!r} "
                                         "prediction.")
                vals.append(float(pred.scalars[name]))
        return np.array(vals + slopes, dtype=float)

    def vector_from_json(self, text: str | None) -> np.ndarray | None:
        """The output vector of a trial-log ``predictions`` cell (JSON), or ``None``
        when it cannot be rebuilt (a failed trial, a log without predictions)."""
        import json

        try:
            raw = json.loads(text) if isinstance(text, str) else None
            if not isinstance(raw, dict):
                return None
            preds = {lab: Prediction.from_json_dict(d) for lab, d in raw.items()}
            return self.vector(preds)
        except (InputDataError, ValueError, TypeError, KeyError, AttributeError):
            return None

    def values(self, Y: Any) -> Any:
        """The value columns ``Y[..., :n_values]`` (the slopes dropped)."""
        return Y[..., : self.n_values]

    # ------------------------------------------------------------- misfit
    def _const(self, name: str, like: Any) -> Any:
        a = getattr(self, name)
        if isinstance(like, torch.Tensor):
            t = self._torch.get(name)
            if t is None or t.dtype != like.dtype or t.device != like.device:
                t = torch.as_tensor(a, dtype=like.dtype, device=like.device)
                self._torch[name] = t
            return t
        return a

    def discrepancy_from_unit(self, X_unit: Any) -> Any:
        """Fitted discrepancy sigma [m/s] at unit-cube points ``(..., d)``, or ``None``."""
        if self.discrepancy_index is None:
            return None
        if self.discrepancy_log10_bounds is None:
            raise InputDataError("OutputLayout: discrepancy_index is set but "
                                 "discrepancy_log10_bounds is not; pass both.")
        lo, hi = self.discrepancy_log10_bounds
        u = X_unit[..., self.discrepancy_index]
        return 10.0 ** (lo + u * (hi - lo))

    def _terms(self, Y: Any, discrepancy_sigma_m_s: Any, extra_variance: Any) -> tuple[Any, Any, Any]:
        xp_torch = isinstance(Y, torch.Tensor)
        if not xp_torch:
            Y = np.asarray(Y, dtype=float)
        if Y.shape[-1] != self.n_outputs:
            raise InputDataError(f"OutputLayout: outputs must have {self.n_outputs} columns "
                                 f"(last axis); got shape {tuple(Y.shape)}.")
        resid = self._const("observed", Y) - Y[..., : self.n_values]
        var = self._const("sigma", Y) ** 2
        is_vel = self._const("is_velocity", Y)
        disc = self.likelihood.discrepancy_sigma_m_s if discrepancy_sigma_m_s is None \
            else discrepancy_sigma_m_s
        if isinstance(disc, (int, float)):
            var = var + float(disc) ** 2 * is_vel
        else:
            disc = disc if xp_torch else np.asarray(disc, dtype=float)
            var = var + disc[..., None] ** 2 * is_vel
        if len(self.slope_of):
            slope = Y[..., self.n_values:]
            sz = self._const("sigma_z", Y)[self.slope_of]
            add = slope**2 * sz**2
            if xp_torch:
                zeros = torch.zeros_like(resid)
                idx = torch.as_tensor(self.slope_of, device=Y.device)
                add = zeros.index_add(-1, idx, add)
            else:
                full = np.zeros(np.broadcast_shapes(resid.shape, (*add.shape[:-1], self.n_values)))
                full[..., self.slope_of] = add
                add = full
            var = var + add
        if extra_variance is not None:
            var = var + extra_variance
        return resid, var, self._const("weights", Y)

    def chi2(self, Y: Any, discrepancy_sigma_m_s: Any = None, extra_variance: Any = None) -> Any:
        """Weighted chi-square of outputs ``Y`` (``(..., m)``, numpy or torch): shape ``(...)``.

        Parameters
        ----------
        Y : array or tensor of shape (..., m)
        discrepancy_sigma_m_s : float or array of shape (...), optional
            Ion-velocity discrepancy; default the likelihood settings'.
        extra_variance : array or tensor of shape (..., n_values), optional
            Added to each value's data variance (e.g. emulator variance).
        """
        r, v, w = self._terms(Y, discrepancy_sigma_m_s, extra_variance)
        return (w * r**2 / v).sum(-1)

    def log_likelihood(self, Y: Any, discrepancy_sigma_m_s: Any = None,
                       extra_variance: Any = None) -> Any:
        """Gaussian log-likelihood of outputs ``Y`` (as :meth:`chi2`; same rules as
        :func:`profshape.likelihood.evaluate_misfit`)."""
        r, v, w = self._terms(Y, discrepancy_sigma_m_s, extra_variance)
        log = torch.log if isinstance(v, torch.Tensor) else np.log
        return (w * (-0.5 * r**2 / v - 0.5 * (_LOG_2PI + log(v)))).sum(-1)

    def dof(self) -> int:
        """Degrees of freedom used by the reduced chi-square: ``max(n - n_fitted, 1)``."""
        p = self.n_fitted
        if p is None:  # the problem's count unless given; 0 without a problem
            p = self.likelihood.n_fitted or 0
        return max(self.n_values - int(p), 1)
