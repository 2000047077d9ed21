"""Profiles that depend on the operating condition (a closure model).

A plain calibration fits one profile for every operating point. A closure lets
each shape coefficient move with declared features of the operating point,
affinely:

.. math::

    c_j(\\text{point}) = a_j + \\sum_k b_{jk}\\, u_k(\\text{point}), \\qquad
    u_k = \\frac{f_k(\\text{point}) - \\bar f_k}{\\Delta f_k},

where :math:`f_k` is feature *k* (a field of the operating point, optionally
as log10), :math:`\\bar f_k` the midpoint and :math:`\\Delta f_k` the span of
that feature over the calibration points. The intercepts :math:`a_j` are the
family's own coefficients (their bounds unchanged); the slopes
:math:`b_{jk}` are new parameters named ``<coefficient>__per__<feature>``,
in the coefficient's unit per unit of normalised feature, so a slope of 1 moves
the coefficient by 1 unit across the calibrated range of the feature. A
coefficient that the affine map takes outside the family's bounds at some point
is held at the bound there and the profile records it (``clipped`` in its
coefficients), so a trial never fails only because a slope is large.

Features are centred on the calibration points, so intercepts keep their
meaning (the coefficient at the middle of the calibrated range) and the slopes
are comparable across features.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Literal

import numpy as np

from .exceptions import InputDataError
from .operating_point import OperatingPoint
from .shapes import Parameter, ShapeFamily

__all__ = ["SLOPE_SEPARATOR", "ConditionClosure", "ConditionFeature"]

#: Joins a coefficient name and a feature name in a slope parameter's name.
SLOPE_SEPARATOR = "__per__"

#: Numeric operating-point fields a feature may use.
_NUMERIC_FIELDS = ("discharge_voltage_V", "anode_mass_flow_kg_s", "magnetic_field_scale",
                   "background_pressure_Pa", "background_temperature_K")


@dataclass(frozen=True)
class ConditionFeature:
    """One feature of the operating point that the profile may depend on.

    Parameters
    ----------
    field : str
        Numeric field of :class:`~profshape.operating_point.OperatingPoint`,
        e.g. ``"discharge_voltage_V"`` or ``"background_pressure_Pa"``.
    transform : {"identity", "log10"}, default="identity"
        ``"log10"`` uses log10 of the field (for pressure or flow, say).
    floor : float, optional
        For ``"log10"``: values below ``floor`` are taken as ``floor`` (in the
        field's unit). Needed when a point has the value 0, such as zero
        background pressure (space); such a point is always an extrapolation.
    """

    field: str
    transform: Literal["identity", "log10"] = "identity"
    floor: float | None = None

    def __post_init__(self) -> None:
        if self.field not in _NUMERIC_FIELDS:
            raise InputDataError(
                f"closure feature: field {self.field!r} is not a numeric operating-point field; "
                f"choose one of {list(_NUMERIC_FIELDS)}.")
        if self.transform not in ("identity", "log10"):
            raise InputDataError(
                f"closure feature {self.field!r}: transform must be 'identity' or 'log10'; got "
                f"{self.transform!r}.")
        if self.floor is not None:
            floor = float(self.floor)
            if self.transform != "log10" or not (math.isfinite(floor) and floor > 0):
                raise InputDataError(
                    f"closure feature {self.field!r}: floor applies to a log10 feature and must be "
                    f"a positive number; got floor={self.floor!r} with transform {self.transform!r}.")
            object.__setattr__(self, "floor", floor)

    @property
    def name(self) -> str:
        """Name used in slope parameters and reports, e.g. ``log10_background_pressure_Pa``."""
        return f"log10_{self.field}" if self.transform == "log10" else self.field

    def raw(self, point: OperatingPoint) -> float:
        """The field's value at ``point`` (its own unit)."""
        value = getattr(point, self.field, None)
        if value is None:
            raise InputDataError(
                f"closure feature {self.name!r}: operating point {point.label!r} has no field "
                f"{self.field!r}.")
        return float(value)

    def value(self, point: OperatingPoint) -> float:
        """The feature at ``point`` (after the transform and floor)."""
        v = self.raw(point)
        if self.transform == "identity":
            return v
        if self.floor is not None:
            v = max(v, self.floor)
        if not v > 0:
            raise InputDataError(
                f"closure feature {self.name!r}: operating point {point.label!r} has "
                f"{self.field} = {v!r}, which has no log10. Fix: give the feature a floor "
                "(e.g. floor = 1e-6 for pressures in Pa) or use transform 'identity'.")
        return math.log10(v)

    def below_floor(self, point: OperatingPoint) -> bool:
        """True when the floor replaced this point's value (an extrapolation)."""
        return self.floor is not None and self.raw(point) < self.floor


@dataclass(frozen=True)
class ConditionClosure:
    """Affine dependence of shape coefficients on operating-point features.

    Parameters
    ----------
    features : sequence of ConditionFeature
        The declared features (at least one).
    coefficients : sequence of str, optional
        Family coefficients that get slopes; by default all of them.
    slope_bounds : mapping of str to (float, float), optional
        Bounds of a slope, by slope parameter name
        (``"<coefficient>__per__<feature>"``) or by coefficient name (for all
        its slopes). By default a slope may move its coefficient by up to half
        the coefficient's bound width across the calibrated range:
        ``(-w/2, w/2)`` with ``w = upper - lower``.
    """

    features: tuple[ConditionFeature, ...]
    coefficients: tuple[str, ...] | None = None
    slope_bounds: Mapping[str, tuple[float, float]] = field(default_factory=dict)

    def __post_init__(self) -> None:
        feats = tuple(self.features)
        if not feats or not all(isinstance(f, ConditionFeature) for f in feats):
            raise InputDataError(
                "closure: features must be a non-empty sequence of ConditionFeature; got "
                f"{self.features!r}.")
        names = [f.name for f in feats]
        if len(set(names)) != len(names):
            raise InputDataError(f"closure: features must be distinct; got {names}.")
        object.__setattr__(self, "features", feats)
        if self.coefficients is not None:
            object.__setattr__(self, "coefficients", tuple(str(c) for c in self.coefficients))
        object.__setattr__(self, "slope_bounds", dict(self.slope_bounds))

    # ------------------------------------------------------------ set-up
    def bind(self, family: ShapeFamily, points: Sequence[OperatingPoint]) -> BoundClosure:
        """Fix the normalisation on the calibration points and build the slope parameters.

        Raises
        ------
        InputDataError
            For an unknown coefficient, a slope bound naming nothing, or a
            feature that is constant across the calibration points.
        """
        return BoundClosure(self, family, tuple(points))


class BoundClosure:
    """A :class:`ConditionClosure` fixed to a family and calibration points."""

    def __init__(self, closure: ConditionClosure, family: ShapeFamily,
                 points: tuple[OperatingPoint, ...]) -> None:
        self.closure = closure
        self.family = family
        names = list(family.names)
        chosen = list(closure.coefficients) if closure.coefficients is not None else names
        unknown = [c for c in chosen if c not in names]
        if unknown:
            raise InputDataError(
                f"closure: coefficient(s) {unknown} are not in family {family.name!r} "
                f"(its coefficients: {names}).")
        self.varying = tuple(chosen)
        if not points:
            raise InputDataError("closure: at least two operating points are needed; got none.")
        centre, span = [], []
        for feat in closure.features:
            values = np.array([feat.value(p) for p in points])
            lo, hi = float(values.min()), float(values.max())
            if not hi - lo > 1e-12 * max(1.0, abs(hi)):
                raise InputDataError(
                    f"closure feature {feat.name!r} is constant ({lo:.6g}) across the calibration "
                    f"points {[p.label for p in points]}, so its slope cannot be calibrated. "
                    "Fix: remove the feature, or add points where it differs.")
            centre.append(0.5 * (lo + hi))
            span.append(hi - lo)
        self.centre = np.array(centre)
        self.span = np.array(span)
        self.ranges = {f.name: (c - s / 2, c + s / 2)
                       for f, c, s in zip(closure.features, centre, span, strict=True)}
        params = []
        by_name = {p.name: p for p in family.parameters}
        known: set[str] = set()
        for coef in self.varying:
            p = by_name[coef]
            width = p.upper - p.lower
            for feat in closure.features:
                slope = f"{coef}{SLOPE_SEPARATOR}{feat.name}"
                known.update((slope, coef))
                lo, hi = closure.slope_bounds.get(slope, closure.slope_bounds.get(
                    coef, (-width / 2, width / 2)))
                params.append(Parameter(
                    slope, float(lo), float(hi), f"{p.unit} per normalised {feat.name}",
                    f"change of {coef} across the calibrated range of {feat.name}"))
        stray = [k for k in closure.slope_bounds if k not in known]
        if stray:
            raise InputDataError(
                f"closure: slope_bounds names {stray}, which are neither slopes nor varying "
                f"coefficients; slopes are {[q.name for q in params]}.")
        self.parameters = tuple(params)
        self._index = np.array([names.index(c) for c in self.varying], dtype=int)

    @property
    def n_slopes(self) -> int:
        """Number of slope parameters."""
        return len(self.parameters)

    def normalised(self, point: OperatingPoint) -> np.ndarray:
        """Normalised features u_k of ``point``, shape (n_features,)."""
        f = np.array([feat.value(point) for feat in self.closure.features])
        return (f - self.centre) / self.span

    def coefficients_at(self, intercepts: np.ndarray, slopes: np.ndarray,
                        point: OperatingPoint) -> tuple[np.ndarray, list[str]]:
        """Family coefficients at ``point`` and the names of those held at a bound.

        Parameters
        ----------
        intercepts : ndarray of shape (n_coefficients,)
            The family coefficients at the middle of the calibrated range.
        slopes : ndarray of shape (n_slopes,)
            In the order of :attr:`parameters` (coefficient-major).
        point : OperatingPoint
        """
        u = self.normalised(point)
        b = np.asarray(slopes, dtype=float).reshape(len(self.varying), len(u))
        c = np.array(intercepts, dtype=float, copy=True)
        c[self._index] += b @ u
        bounds = self.family.bounds
        clipped = [self.family.names[i] for i in range(c.size)
                   if c[i] < bounds[i, 0] or c[i] > bounds[i, 1]]
        return np.clip(c, bounds[:, 0], bounds[:, 1]), clipped

    def extrapolation_reason(self, point: OperatingPoint) -> str:
        """Why ``point`` lies outside the features' calibrated range ('' when inside)."""
        reasons = []
        for feat in self.closure.features:
            lo, hi = self.ranges[feat.name]
            if feat.below_floor(point):
                reasons.append(f"{feat.field} = {feat.raw(point):.4g} below the feature floor "
                               f"{feat.floor:.4g} (outside the calibrated conditions)")
                continue
            v = feat.value(point)
            tol = 1e-9 * max(1.0, abs(hi - lo))
            if v < lo - tol or v > hi + tol:
                reasons.append(f"{feat.name} = {v:.4g} outside calibrated [{lo:.4g}, {hi:.4g}]")
        return "; ".join(reasons)
