"""A calibration problem: shape family + data + forward model + likelihood."""

from __future__ import annotations

import math
import time
from collections.abc import Mapping
from concurrent.futures import Executor
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .closure import BoundClosure, ConditionClosure
from .data import DataSet
from .exceptions import InputDataError
from .fan_out import run_profiles
from .forward.base import ForwardModel, Prediction
from .likelihood import LikelihoodSettings, Misfit, evaluate_misfit
from .operating_point import OperatingPoint
from .parameter_space import Parameter, ParameterSpace, check_in_bounds, from_unit, to_unit
from .profile import AnomalousProfile
from .shapes import ShapeFamily

__all__ = ["CalibrationProblem", "TrialOutcome"]

SCALE_PREFIX = "log10_scale__"
DISCREPANCY_NAME = "log10_discrepancy_sigma_m_s"


@dataclass(frozen=True, eq=False)
class TrialOutcome:
    """The result of evaluating one coefficient vector.

    Attributes
    ----------
    status : {"ok", "failed", "timeout", "not_converged"}
        ``"ok"`` only when every operating point ran and the misfit is finite.
    reason : str
        Why the trial failed (empty when ok).
    misfit : Misfit
    predictions : dict of label to Prediction
    coefficients : ndarray of shape (d,)
        The coefficients evaluated (physical units, full search space).
    wall_time_s : float
        Wall time of the whole trial [s].
    """

    status: str
    reason: str
    misfit: Misfit
    predictions: dict[str, Prediction] = field(default_factory=dict)
    coefficients: np.ndarray = field(default_factory=lambda: np.zeros(0))
    wall_time_s: float = 0.0

    @property
    def ok(self) -> bool:
        """True when the trial gave a usable misfit."""
        return self.status == "ok"


class CalibrationProblem(ParameterSpace):
    """What is calibrated against what.

    The search space is the shape family's coefficients, followed by the
    closure's slopes when ``closure`` is given (coefficients that vary with
    the operating condition, see :mod:`profshape.closure`), by one
    ``log10_scale__<label>`` per operating point when
    ``free_scale_per_point`` (the same shape, scaled per point), and by
    ``log10_discrepancy_sigma_m_s`` when ``discrepancy_bounds_m_s`` is given
    (a fitted model-discrepancy standard deviation).

    Parameters
    ----------
    family : ShapeFamily
    dataset : DataSet
    forward_model : ForwardModel
    likelihood : LikelihoodSettings, optional
    free_scale_per_point : bool, default=False
    scale_bounds_log10 : (float, float), default=(-1.0, 1.0)
        Bounds of each per-point log10 scale.
    discrepancy_bounds_m_s : (float, float), optional
        Bounds [m/s] of a fitted discrepancy sigma, searched in log10.
    closure : ConditionClosure, optional
        Affine dependence of coefficients on features of the operating point,
        normalised over the data set's points.

    Raises
    ------
    InputDataError
        If measurement positions fall outside the forward model's grid.
    """

    def __init__(
        self,
        family: ShapeFamily,
        dataset: DataSet,
        forward_model: ForwardModel,
        likelihood: LikelihoodSettings | None = None,
        free_scale_per_point: bool = False,
        scale_bounds_log10: tuple[float, float] = (-1.0, 1.0),
        discrepancy_bounds_m_s: tuple[float, float] | None = None,
        closure: ConditionClosure | None = None,
    ) -> None:
        if not isinstance(family, ShapeFamily):
            raise InputDataError(f"family must be a ShapeFamily; got {type(family).__name__}.")
        if not isinstance(dataset, DataSet):
            raise InputDataError(f"dataset must be a DataSet; got {type(dataset).__name__}.")
        if not isinstance(forward_model, ForwardModel):
            raise InputDataError(
                f"forward_model must be a ForwardModel; got {type(forward_model).__name__} "
                "(wrap a function with profshape.forward.CallableModel)."
            )
        self.family = family
        self.dataset = dataset
        self.forward_model = forward_model
        self.likelihood = likelihood or LikelihoodSettings()
        self.free_scale_per_point = bool(free_scale_per_point)
        extra: list[Parameter] = []
        self.closure: BoundClosure | None = None
        if closure is not None:
            if not isinstance(closure, ConditionClosure):
                raise InputDataError(
                    f"closure must be a ConditionClosure; got {type(closure).__name__}.")
            if len(dataset) < 2:
                raise InputDataError(
                    "closure: a profile that depends on the operating condition needs at least two "
                    f"operating points; the data set has {len(dataset)}. Fix: add points or drop "
                    "the closure.")
            self.closure = closure.bind(family, dataset.operating_points)
            extra += list(self.closure.parameters)
        if self.free_scale_per_point:
            extra += [Parameter(f"{SCALE_PREFIX}{lab}", *scale_bounds_log10, "log10(-)",
                                f"log10 of the profile factor at {lab}") for lab in dataset.labels]
        self.fit_discrepancy = discrepancy_bounds_m_s is not None
        if discrepancy_bounds_m_s is not None:
            lo, hi = (float(v) for v in discrepancy_bounds_m_s)
            if not (0 < lo < hi and math.isfinite(hi)):
                raise InputDataError(
                    f"discrepancy_bounds_m_s must satisfy 0 < lower < upper [m/s]; got "
                    f"{discrepancy_bounds_m_s!r}."
                )
            extra.append(Parameter(DISCREPANCY_NAME, math.log10(lo), math.log10(hi),
                                   "log10(m/s)", "model-discrepancy sigma of the ion velocity"))
        self._extra = tuple(extra)
        for point in dataset.operating_points:
            grid = forward_model.grid(point)
            velocity = dataset[point.label].ion_velocity
            if grid is not None and len(grid) > 1 and velocity is not None:
                velocity.check_domain(float(np.min(grid)), float(np.max(grid)))

    # -------------------------------------------------------------- the space
    @property
    def parameters(self) -> tuple[Parameter, ...]:
        """All searched parameters: family, then per-point scales, then discrepancy."""
        return tuple(self.family.parameters) + self._extra

    @property
    def dim(self) -> int:
        """Dimension of the search space."""
        return len(self.parameters)

    def to_unit(self, coefficients: Any) -> np.ndarray:
        """Coefficients (physical units) → unit cube."""
        return np.asarray(to_unit(np.asarray(coefficients, dtype=float), self.bounds))

    def from_unit(self, unit: Any) -> np.ndarray:
        """Unit cube → coefficients (physical units)."""
        return np.asarray(from_unit(np.asarray(unit, dtype=float), self.bounds))

    def validate(self, coefficients: Any) -> np.ndarray:
        """Check a full coefficient vector (or a name → value mapping); see ShapeFamily.validate."""
        if isinstance(coefficients, Mapping):
            missing = [n for n in self.names if n not in coefficients]
            extra = [k for k in coefficients if k not in self.names]
            if missing or extra:
                raise InputDataError(
                    f"coefficients by name must give exactly {list(self.names)}; "
                    f"missing {missing}, unknown {extra}."
                )
            coefficients = [float(coefficients[n]) for n in self.names]
        c = np.asarray(coefficients, dtype=float)
        if c.shape != (self.dim,):
            raise InputDataError(
                f"coefficients must have shape ({self.dim},) for {list(self.names)}; got {c.shape}."
            )
        d = self.family.n_coefficients
        shape_part = self.family.validate(c[:d])
        if self._extra:
            rest = check_in_bounds(c[d:], self._extra, "calibration problem")
            return np.concatenate([shape_part, rest])
        return shape_part

    def coefficient_dict(self, coefficients: Any) -> dict[str, float]:
        """Name → value mapping of a full coefficient vector."""
        c = self.validate(coefficients)
        return {n: float(v) for n, v in zip(self.names, c, strict=True)}

    @property
    def n_fitted(self) -> int:
        """Fitted parameters p in the degrees of freedom n - p: all searched parameters
        (family coefficients, per-point scales, a fitted discrepancy) unless
        ``likelihood.n_fitted`` is set."""
        if self.likelihood.n_fitted is not None:
            return int(self.likelihood.n_fitted)
        return self.dim

    # ------------------------------------------------------------ profiles
    def profile_for(self, coefficients: Any, label: str) -> AnomalousProfile:
        """The profile run at operating point ``label`` (with its scale, if free)."""
        return self.profile_at(coefficients, self.dataset[label].point)

    def profile_at(self, coefficients: Any, point: OperatingPoint) -> AnomalousProfile:
        """The profile at any operating point, in the data set or not.

        With a closure the family coefficients follow the point's features; a
        point outside the data set with free per-point scales gets the mean
        of the per-point log10 scales.
        """
        return self._profile_at(self.validate(coefficients), point)

    def profiles(self, coefficients: Any) -> dict[str, AnomalousProfile]:
        """The profile run at each operating point of the data set, by label.

        The coefficients are checked once (see :meth:`validate`).
        """
        c = self.validate(coefficients)
        return {p.label: self._profile_at(c, p) for p in self.dataset.operating_points}

    def _profile_at(self, c: np.ndarray, point: OperatingPoint) -> AnomalousProfile:
        """:meth:`profile_at` of checked coefficients."""
        d = self.family.n_coefficients
        shape = c[:d]
        notes: dict[str, float] = {}
        if self.closure is not None:
            slopes = c[d:d + self.closure.n_slopes]
            shape, clipped = self.closure.coefficients_at(shape, slopes, point)
            notes = {f"clipped__{name}": 1.0 for name in clipped}
        base = self.family.profile(shape, validate=self.closure is not None)
        if notes:
            base = base.scaled(1.0, **notes)
        if not self.free_scale_per_point:
            return base
        name = f"{SCALE_PREFIX}{point.label}"
        if name in self.names and point.label in self.dataset.labels:
            log_scale = float(c[self.names.index(name)])
        else:
            log_scale = float(np.mean([c[i] for i, n in enumerate(self.names)
                                       if n.startswith(SCALE_PREFIX)]))
        return base.scaled(10.0 ** log_scale, **{name: log_scale})

    def discrepancy_sigma_m_s(self, coefficients: Any) -> float:
        """The ion-velocity discrepancy sigma [m/s] for these coefficients."""
        if not self.fit_discrepancy:
            return self.likelihood.discrepancy_sigma_m_s
        return float(10.0 ** np.asarray(coefficients, dtype=float)[self.names.index(DISCREPANCY_NAME)])

    # ------------------------------------------------------------ evaluate
    def run_points(
        self, coefficients: Any, executor: Executor | None = None
    ) -> dict[str, Prediction]:
        """Run the forward model at every operating point (in parallel on ``executor``).

        A worker that dies or an executor error gives a ``"failed"`` prediction
        (see :mod:`profshape.fan_out`).
        """
        return run_profiles(self.forward_model, [self.profiles(coefficients)], self._points,
                            executor)[0]

    def evaluate_many(self, coefficients: Any, executor: Executor | None = None
                      ) -> list[TrialOutcome]:
        """:meth:`evaluate` each row of ``coefficients`` (n, d); every run submitted at once.

        Raises
        ------
        InputDataError
            For invalid coefficients (before any forward run).
        """
        rows = [self.validate(r) for r in np.atleast_2d(np.asarray(coefficients, dtype=float))]
        if executor is None:
            return [self._evaluate_checked(c, None) for c in rows]
        runs = run_profiles(self.forward_model, [self.profiles(c) for c in rows], self._points,
                            executor)
        # the points of a trial run side by side: its wall time is the slowest point's
        return [self.outcome(c, preds, max((p.wall_time_s for p in preds.values()), default=0.0))
                for c, preds in zip(rows, runs, strict=True)]

    @property
    def _points(self) -> dict[str, OperatingPoint]:
        return {p.label: p for p in self.dataset.operating_points}

    def outcome(self, coefficients: Any, predictions: Mapping[str, Prediction],
                wall_time_s: float = 0.0) -> TrialOutcome:
        """Judge given predictions (one per point) as a trial outcome."""
        c = np.asarray(coefficients, dtype=float)
        preds = dict(predictions)
        failed = [(lab, p) for lab, p in preds.items() if not p.ok]
        if failed:
            status = failed[0][1].status
            reason = "; ".join(f"point {lab}: {p.status}: {p.reason}" for lab, p in failed)
            return TrialOutcome(status, reason, Misfit.failure(reason, self.dataset.n_data),
                                preds, c, wall_time_s)
        misfit = evaluate_misfit(self.dataset, preds, self.likelihood,
                                 discrepancy_sigma_m_s=self.discrepancy_sigma_m_s(c)
                                 if self.fit_discrepancy else None,
                                 n_fitted=self.n_fitted)
        if not misfit.ok:
            return TrialOutcome("failed", misfit.reason, misfit, preds, c, wall_time_s)
        return TrialOutcome("ok", "", misfit, preds, c, wall_time_s)

    def evaluate(self, coefficients: Any, executor: Executor | None = None) -> TrialOutcome:
        """Run one trial: every operating point, then the misfit.

        Never raises for a failed forward run (that is a ``TrialOutcome`` with
        a status and reason); raises :class:`InputDataError` for invalid
        coefficients.
        """
        return self._evaluate_checked(self.validate(coefficients), executor)

    def _evaluate_checked(self, c: np.ndarray, executor: Executor | None) -> TrialOutcome:
        start = time.perf_counter()
        profiles = {p.label: self._profile_at(c, p) for p in self.dataset.operating_points}
        preds = run_profiles(self.forward_model, [profiles], self._points, executor)[0]
        return self.outcome(c, preds, time.perf_counter() - start)
