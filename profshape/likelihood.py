r"""Gaussian likelihood and reduced chi-square of predictions against data.

For each measured ion velocity :math:`u_i \pm \sigma_i` at :math:`z_i \pm
\sigma_{z,i}` the model :math:`\hat u(z)` is interpolated linearly to
:math:`z_i` and the residual is judged against the effective variance

.. math::

    s_i^2 = \sigma_i^2 + \left(\frac{d\hat u}{dz}\right)^2_{z_i} \sigma_{z,i}^2
            + \sigma_\mathrm{d}^2,

(position uncertainty propagated through the model's local slope, the
"effective variance" method of Orear, Am. J. Phys. 50, 1982; plus an optional
model-discrepancy variance :math:`\sigma_\mathrm{d}^2`). The other profile
observables (plasma potential, electron temperature, plasma density; see
:mod:`profshape.observables`) are judged the same way, each with its own
discrepancy sigma (:attr:`LikelihoodSettings.profile_discrepancy`). Scalars are
judged against their own sigma plus an optional discrepancy relative to the
measured value, per scalar name if wished
(:attr:`LikelihoodSettings.scalar_discrepancy`).
With per-observable weights :math:`w`,

.. math::

    \ln L = \sum_i w_i \left[-\tfrac12 \frac{r_i^2}{s_i^2}
            - \tfrac12 \ln(2\pi s_i^2)\right], \qquad
    \chi^2 = \sum_i w_i \frac{r_i^2}{s_i^2}, \qquad
    \chi^2_\nu = \frac{\chi^2}{n - p},

summed over operating points, with :math:`n` the number of measured values
and :math:`p` the number of fitted parameters. A
:class:`~profshape.problem.CalibrationProblem` sets :math:`p` to the number of
parameters it fits (family coefficients, per-point scales, a fitted
discrepancy) unless :attr:`LikelihoodSettings.n_fitted` says otherwise. With
unit weights and a model linear in its parameters, the chi-square of the best
fit follows a chi-square law with :math:`n - p` degrees of freedom, and
:attr:`Misfit.tail_probability` is ``scipy.stats.chi2.sf(chi2, n - p)``.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, NamedTuple

import numpy as np

from .data import DataSet, OperatingPointData
from .exceptions import InputDataError
from .forward.base import Prediction

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["LikelihoodSettings", "MeasuredProfile", "Misfit", "evaluate_misfit",
           "measured_profiles", "residual_table"]

_LOG_2PI = math.log(2.0 * math.pi)


@dataclass(frozen=True)
class LikelihoodSettings:
    """How predictions are judged against the data.

    Parameters
    ----------
    discrepancy_sigma_m_s : float, default=0.0
        Model-discrepancy standard deviation [m/s] added in quadrature to each
        ion-velocity uncertainty.
    scalar_discrepancy_relative : float, default=0.0
        Model discrepancy of scalars as a fraction of the measured value.
    weights : mapping of str to float, optional
        Weight per observable, keyed by observable name (``"ion_velocity"``,
        ``"discharge_current"``, ...) or by ``"label/observable"``; default 1.
    profile_discrepancy : mapping of str to float, optional
        Model-discrepancy standard deviation per profile observable other than
        the ion velocity, in its SI unit (``{"plasma_potential": 5.0}`` [V]);
        default 0.
    scalar_discrepancy : mapping of str to float, optional
        Relative model discrepancy per scalar name (overrides
        ``scalar_discrepancy_relative`` for that name).
    use_position_uncertainty : bool, default=True
        Propagate ``sigma_z_m`` through the model's local slope.
    n_fitted : int or None, default=None
        Number of fitted parameters p in the degrees of freedom n - p of the
        reduced chi-square. None: set by the calibration problem (the number of
        parameters it fits); 0 when a misfit is computed without a problem.
    """

    discrepancy_sigma_m_s: float = 0.0
    scalar_discrepancy_relative: float = 0.0
    weights: Mapping[str, float] = field(default_factory=dict)
    use_position_uncertainty: bool = True
    n_fitted: int | None = None
    profile_discrepancy: Mapping[str, float] = field(default_factory=dict)
    scalar_discrepancy: Mapping[str, float] = field(default_factory=dict)

    def __post_init__(self) -> None:
        for name in ("discrepancy_sigma_m_s", "scalar_discrepancy_relative"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise InputDataError(f"likelihood: {name} must be a finite number >= 0; got {v!r}.")
        w = dict(self.weights)
        for key, v in w.items():
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise InputDataError(
                    f"likelihood: weight for {key!r} must be a finite number >= 0; got {v!r}."
                )
        object.__setattr__(self, "weights", w)
        from .observables import PROFILE_UNITS, unknown_profile_message

        for attr in ("profile_discrepancy", "scalar_discrepancy"):
            d = dict(getattr(self, attr))
            for key, v in d.items():
                if attr == "profile_discrepancy" and (key not in PROFILE_UNITS
                                                      or key == "ion_velocity"):
                    why = ("the ion velocity's is discrepancy_sigma_m_s" if key == "ion_velocity"
                           else unknown_profile_message(key))
                    raise InputDataError(f"likelihood: {attr} key {key!r}: {why}.")
                if not (isinstance(v, (int, float)) and not isinstance(v, bool)
                        and math.isfinite(v) and v >= 0):
                    raise InputDataError(f"likelihood: {attr}[{key!r}] must be a finite number "
                                         f">= 0; got {v!r}.")
            object.__setattr__(self, attr, {str(k): float(v) for k, v in d.items()})
        if self.n_fitted is not None and (
                isinstance(self.n_fitted, bool) or not isinstance(self.n_fitted, int | float)
                or int(self.n_fitted) != self.n_fitted or self.n_fitted < 0):
            raise InputDataError(f"likelihood: n_fitted must be an integer >= 0; got {self.n_fitted!r}.")

    def profile_discrepancy_sigma(self, observable: str) -> float:
        """Discrepancy sigma of a profile observable in its SI unit."""
        if observable == "ion_velocity":
            return float(self.discrepancy_sigma_m_s)
        return float(self.profile_discrepancy.get(observable, 0.0))

    def scalar_variance(self, name: str, value: float, sigma: float) -> float:
        """Data plus relative-discrepancy variance of a measured scalar."""
        rel = self.scalar_discrepancy.get(name, self.scalar_discrepancy_relative)
        return float(sigma**2 + (rel * value) ** 2)

    def weight(self, label: str, observable: str) -> float:
        """Weight of ``observable`` at operating point ``label``."""
        return float(self.weights.get(f"{label}/{observable}", self.weights.get(observable, 1.0)))


@dataclass(frozen=True)
class Misfit:
    """The misfit of one trial (all operating points).

    Attributes
    ----------
    ok : bool
        False when a prediction failed or could not be compared; then
        ``chi2`` and ``reduced_chi2`` are +inf and ``log_likelihood`` is -inf,
        and they must not be used as numbers: check ``ok`` first.
    reason : str
        Why the misfit could not be computed (empty when ok).
    log_likelihood : float
        Gaussian log-likelihood ln L.
    chi2 : float
        Weighted chi-square.
    n_data : int
        Number of measured values compared.
    reduced_chi2 : float
        chi2 / dof.
    dof : int
        Degrees of freedom n_data - n_fitted (at least 1).
    n_fitted : int
        Number of fitted parameters p used in ``dof``.
    per_point : dict of str to float
        Chi-square per operating point.
    per_observable : dict of str to float
        Chi-square per ``"label/observable"``.
    """

    ok: bool
    reason: str = ""
    log_likelihood: float = -math.inf
    chi2: float = math.inf
    n_data: int = 0
    reduced_chi2: float = math.inf
    per_point: dict[str, float] = field(default_factory=dict)
    per_observable: dict[str, float] = field(default_factory=dict)
    dof: int = 1
    n_fitted: int = 0

    @property
    def tail_probability(self) -> float:
        """``P(X >= chi2)`` for X chi-square with ``dof`` degrees of freedom (scipy.stats.chi2.sf).

        Below 0.001 the model (or the family) cannot match the data within
        the stated uncertainties. NaN when the misfit is not ok.
        """
        if not self.ok:
            return math.nan
        from scipy import stats

        return float(stats.chi2.sf(self.chi2, self.dof))

    @classmethod
    def failure(cls, reason: str, n_data: int = 0) -> Misfit:
        """A misfit that could not be computed."""
        return cls(ok=False, reason=reason, n_data=n_data)


def _gaussian_terms(residual: np.ndarray, variance: np.ndarray, weight: float) -> tuple[float, float]:
    chi2 = float(weight * np.sum(residual**2 / variance))
    loglike = float(weight * np.sum(-0.5 * residual**2 / variance - 0.5 * (_LOG_2PI + np.log(variance))))
    return chi2, loglike


class MeasuredProfile(NamedTuple):
    """One measured profile observable at a point (SI units)."""

    observable: str
    z_m: np.ndarray
    value: np.ndarray
    sigma: np.ndarray
    sigma_z_m: np.ndarray | None


def measured_profiles(data: OperatingPointData) -> list[MeasuredProfile]:
    """``(observable, z_m, value, sigma, sigma_z_m)`` of each measured profile at a point:
    the ion velocity first, then the others in the data's order."""
    out = []
    if data.ion_velocity is not None:
        m = data.ion_velocity
        out.append(MeasuredProfile("ion_velocity", m.z_m, m.velocity_m_s, m.sigma_m_s,
                                   m.sigma_z_m))
    for name, p in data.profiles.items():
        out.append(MeasuredProfile(name, p.z_m, p.value, p.sigma, p.sigma_z_m))
    return out


def _profile_terms(
    meas: MeasuredProfile, prediction: Prediction, settings: LikelihoodSettings,
) -> tuple[np.ndarray, np.ndarray] | str:
    """Residuals and effective variances of one profile observable, or a failure reason."""
    name, z, value, sigma, sigma_z = meas
    model_values = prediction.profile(name)
    if prediction.z_m is None or model_values is None:
        return f"the forward model gave no {name.replace('_', '-')} prediction"
    zg, ug = prediction.z_m, model_values
    lo, hi = zg[0], zg[-1]
    tol = 1e-9 * max(abs(hi - lo), 1e-12)
    if z[0] < lo - tol or z[-1] > hi + tol:
        return (f"prediction covers z in [{lo:.6g}, {hi:.6g}] m but {name} measurements span "
                f"[{z[0]:.6g}, {z[-1]:.6g}] m")
    model = np.interp(z, zg, ug)
    variance = sigma**2 + settings.profile_discrepancy_sigma(name) ** 2
    if settings.use_position_uncertainty and sigma_z is not None:
        slope = np.interp(z, zg, np.gradient(ug, zg))
        variance = variance + slope**2 * sigma_z**2
    return value - model, variance


def evaluate_misfit(
    dataset: DataSet,
    predictions: Mapping[str, Prediction],
    settings: LikelihoodSettings | None = None,
    *,
    discrepancy_sigma_m_s: float | None = None,
    n_fitted: int | None = None,
) -> Misfit:
    """Compare predictions with a data set.

    Parameters
    ----------
    dataset : DataSet
    predictions : mapping of label to Prediction
        One prediction per operating point of ``dataset``.
    settings : LikelihoodSettings, optional
    discrepancy_sigma_m_s : float, optional
        Overrides ``settings.discrepancy_sigma_m_s`` (for a fitted discrepancy).
    n_fitted : int, optional
        Number of fitted parameters p (degrees of freedom n - p); used when
        ``settings.n_fitted`` is None (a problem passes its own count), else 0.

    Returns
    -------
    Misfit
        ``ok=False`` with a reason if any prediction failed, is missing, lacks
        an observed quantity, or does not cover the measured positions.
    """
    settings = settings or LikelihoodSettings()
    if discrepancy_sigma_m_s is not None:
        if not (math.isfinite(discrepancy_sigma_m_s) and discrepancy_sigma_m_s >= 0):
            return Misfit.failure(f"discrepancy_sigma_m_s must be finite and >= 0; got "
                                  f"{discrepancy_sigma_m_s!r}", dataset.n_data)
        settings = dataclasses.replace(settings, discrepancy_sigma_m_s=float(discrepancy_sigma_m_s))
    chi2_total = 0.0
    loglike_total = 0.0
    per_point: dict[str, float] = {}
    per_observable: dict[str, float] = {}
    n_data = dataset.n_data
    for data in dataset:
        label = data.label
        pred = predictions.get(label)
        if pred is None:
            return Misfit.failure(f"point {label}: no prediction", n_data)
        if not pred.ok:
            return Misfit.failure(f"point {label}: {pred.status}: {pred.reason}", n_data)
        point_chi2 = 0.0
        for meas in measured_profiles(data):
            name = meas.observable
            terms = _profile_terms(meas, pred, settings)
            if isinstance(terms, str):
                return Misfit.failure(f"point {label}: {terms}", n_data)
            c2, ll = _gaussian_terms(*terms, settings.weight(label, name))
            per_observable[f"{label}/{name}"] = c2
            point_chi2 += c2
            loglike_total += ll
        for name, obs in data.scalars.items():
            if name not in pred.scalars:
                return Misfit.failure(
                    f"point {label}: the forward model gave no {name!r} prediction "
                    f"(it gave {sorted(pred.scalars)})", n_data)
            residual = np.array([obs.value - pred.scalars[name]])
            variance = np.array([settings.scalar_variance(name, obs.value, obs.sigma)])
            c2, ll = _gaussian_terms(residual, variance, settings.weight(label, name))
            per_observable[f"{label}/{name}"] = c2
            point_chi2 += c2
            loglike_total += ll
        per_point[label] = point_chi2
        chi2_total += point_chi2
    p = _n_fitted(settings, n_fitted)
    dof = max(n_data - p, 1)
    if not (math.isfinite(chi2_total) and math.isfinite(loglike_total)):
        return Misfit.failure("misfit is not finite", n_data)
    return Misfit(
        ok=True,
        log_likelihood=loglike_total,
        chi2=chi2_total,
        n_data=n_data,
        reduced_chi2=chi2_total / dof,
        per_point=per_point,
        per_observable=per_observable,
        dof=dof,
        n_fitted=p,
    )


def _n_fitted(settings: LikelihoodSettings, n_fitted: int | None) -> int:
    if settings.n_fitted is not None:
        return int(settings.n_fitted)
    if n_fitted is None:
        return 0
    if isinstance(n_fitted, bool) or int(n_fitted) != n_fitted or n_fitted < 0:
        raise InputDataError(f"likelihood: n_fitted must be an integer >= 0; got {n_fitted!r}.")
    return int(n_fitted)


def residual_table(
    dataset: DataSet,
    predictions: Mapping[str, Prediction],
    settings: LikelihoodSettings | None = None,
    *,
    discrepancy_sigma_m_s: float | None = None,
) -> pd.DataFrame:
    """Each measured value's contribution to the chi-square.

    Parameters
    ----------
    dataset, predictions, settings, discrepancy_sigma_m_s
        As for :func:`evaluate_misfit`.

    Returns
    -------
    DataFrame
        One row per measured value: ``label``, ``observable``, ``z_m`` (NaN
        for scalars), ``measured``, ``model``, ``sigma_effective`` (the square
        root of the effective variance), ``normalised_residual`` ((measured -
        model) / sigma_effective) and ``chi2`` (weighted square of it; the rows
        sum to :attr:`Misfit.chi2`). Operating points whose prediction failed
        or does not cover the data are left out.
    """
    import pandas as pd

    settings = settings or LikelihoodSettings()
    if discrepancy_sigma_m_s is not None:
        settings = dataclasses.replace(settings, discrepancy_sigma_m_s=float(discrepancy_sigma_m_s))
    rows: list[dict[str, object]] = []
    for data in dataset:
        label = data.label
        pred = predictions.get(label)
        if pred is None or not pred.ok:
            continue
        for meas in measured_profiles(data):
            name = meas.observable
            terms = _profile_terms(meas, pred, settings)
            if not isinstance(terms, str):
                residual, variance = terms
                w = settings.weight(label, name)
                for z, y, r, v in zip(meas.z_m, meas.value, residual, variance, strict=True):
                    rows.append({"label": label, "observable": name, "z_m": float(z),
                                 "measured": float(y), "model": float(y - r),
                                 "sigma_effective": float(np.sqrt(v)),
                                 "normalised_residual": float(r / np.sqrt(v)),
                                 "chi2": float(w * r * r / v)})
        for name, obs in data.scalars.items():
            if name not in pred.scalars:
                continue
            r = obs.value - float(pred.scalars[name])
            v = settings.scalar_variance(name, obs.value, obs.sigma)
            w = settings.weight(label, name)
            rows.append({"label": label, "observable": name, "z_m": math.nan,
                         "measured": float(obs.value), "model": float(pred.scalars[name]),
                         "sigma_effective": float(math.sqrt(v)),
                         "normalised_residual": float(r / math.sqrt(v)),
                         "chi2": float(w * r * r / v)})
    cols = ["label", "observable", "z_m", "measured", "model", "sigma_effective",
            "normalised_residual", "chi2"]
    return pd.DataFrame(rows, columns=cols)
