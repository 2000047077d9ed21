"""Posterior predictive of the scalar outputs, at data points or new operating points."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import InputDataError
from ..operating_point import OperatingPoint
from ..profile import AnomalousProfile
from ._evaluate import DrawRun
from .bands import scalar_table
from .protocol import PosteriorProblem
from .result import PosteriorResult
from .settings import check_levels

__all__ = ["calibrated_range", "extrapolation_reason", "predict_scalars"]



def calibrated_range(problem: PosteriorProblem) -> dict[str, tuple[float, float]]:
    """Min and max of voltage [V], anode flow [kg/s] and field scale [-] over the data."""
    pts = problem.dataset.operating_points
    out = {}
    for attr in ("discharge_voltage_V", "anode_mass_flow_kg_s", "magnetic_field_scale"):
        vals = [float(getattr(p, attr)) for p in pts]
        out[attr] = (min(vals), max(vals))
    return out


def extrapolation_reason(problem: PosteriorProblem, point: OperatingPoint) -> str:
    """Why ``point`` lies outside the calibrated range (empty string when inside)."""
    reasons = []
    rel = 1e-9
    for attr, (lo, hi) in calibrated_range(problem).items():
        v = float(getattr(point, attr))
        if v < lo * (1 - rel) or v > hi * (1 + rel):
            reasons.append(f"{attr} = {v:.4g} outside calibrated [{lo:.4g}, {hi:.4g}]")
    props = {p.propellant for p in problem.dataset.operating_points}
    if point.propellant not in props:
        reasons.append(f"propellant {point.propellant!r} not in the data ({sorted(props)})")
    closure = getattr(problem, "closure", None)
    if closure is not None:
        why = closure.extrapolation_reason(point)
        if why:
            reasons.append(why)
    return "; ".join(reasons)


def _profile_at(problem: PosteriorProblem, coeffs: np.ndarray, point: OperatingPoint,
                in_data: bool) -> AnomalousProfile:
    if in_data:
        return problem.profile_for(coeffs, point.label)
    # Off the data: the closure's law at this point, and the mean per-point log10 scale.
    return problem.profile_at(coeffs, point)


def _run_point(problem: PosteriorProblem, profile: AnomalousProfile, point: OperatingPoint) -> DrawRun:
    pred = problem.forward_model(profile, point)
    return DrawRun(status=pred.status, reason=pred.reason, log_likelihood=0.0,
                   predictions={point.label: pred})


def predict_scalars(
    problem: PosteriorProblem,
    posterior: PosteriorResult,
    points: Sequence[OperatingPoint] | None = None,
    *,
    n_draws: int = 32,
    levels: Sequence[float] = (0.68, 0.95),
    executor: Any = None,
    seed: int | None = 0,
) -> pd.DataFrame:
    """Posterior predictive table of the forward model's scalar outputs.

    Parameters
    ----------
    problem : CalibrationProblem
    posterior : PosteriorResult
    points : sequence of OperatingPoint, optional
        Where to predict; default the data's operating points. A point whose
        label and settings match a data point uses that point's calibrated
        profile (including its per-point scale); any other point is a
        prediction away from calibration.
    n_draws : int, default=32
        Posterior draws per point (one forward run each, plus one MAP run).
    levels : sequence of float, default=(0.68, 0.95)
    executor : Executor or dask Client, optional
        Runs the forward runs in parallel.
    seed : int or None, default=0

    Returns
    -------
    DataFrame
        One row per (``label``, ``name``): ``unit``, ``median``, ``mean``,
        ``std``, ``lower_<level>``, ``upper_<level>``, ``map``, ``measured``,
        ``measured_sigma``, ``n_ok``, ``n_failed``, ``in_data``,
        ``extrapolation`` (outside the calibrated voltage / flow / field-scale
        range or another propellant) and ``extrapolation_reason``.
    """
    levels_t = check_levels(levels, "levels")
    if int(n_draws) != n_draws or n_draws < 1:
        raise InputDataError(f"predict_scalars: n_draws must be an integer >= 1; got {n_draws!r}.")
    points = list(problem.dataset.operating_points if points is None else points)
    for p in points:
        if not isinstance(p, OperatingPoint):
            raise InputDataError(
                f"predict_scalars: points must be OperatingPoint objects; got {type(p).__name__}."
            )
    labels = [p.label for p in points]
    if len(set(labels)) != len(labels):
        raise InputDataError(f"predict_scalars: point labels must be unique; got {labels}.")
    data_points = {p.label: p for p in problem.dataset.operating_points}
    coeffs = posterior.draw(int(n_draws), seed=seed)
    map_c = posterior.map_vector
    frames = []
    for point in points:
        in_data = data_points.get(point.label) == point
        jobs = [(_profile_at(problem, c, point, in_data), point) for c in [map_c, *coeffs]]
        if executor is None:
            runs = [_run_point(problem, prof, pt) for prof, pt in jobs]
        else:
            futs = [executor.submit(problem.forward_model, prof, pt) for prof, pt in jobs]
            runs = []
            for fut in futs:
                try:
                    pred = fut.result()
                    runs.append(DrawRun(status=pred.status, reason=pred.reason,
                                        log_likelihood=0.0, predictions={point.label: pred}))
                except Exception as exc:
                    runs.append(DrawRun(status="failed", reason=f"{type(exc).__name__}: {exc}"))
        measured = {point.label: dict(problem.dataset[point.label].scalars)} if in_data else {}
        table = scalar_table([point.label], runs[1:], levels_t, runs[0], measured)
        reason = extrapolation_reason(problem, point)
        table["in_data"] = in_data
        table["extrapolation"] = bool(reason)
        table["extrapolation_reason"] = reason
        if table.empty:
            failed = [r.reason for r in runs if not r.ok][:3]
            table = pd.DataFrame([{
                "label": point.label, "name": "", "n_ok": 0, "n_failed": len(runs) - 1,
                "in_data": in_data, "extrapolation": bool(reason),
                "extrapolation_reason": reason or "; ".join(failed),
            }])
        frames.append(table)
    return pd.concat(frames, ignore_index=True)
