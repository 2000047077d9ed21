r"""Held-out validation of a finished calibration: leave one operating point out.

For each operating point *k* of a run with at least three points, the run's
trials are judged again on the data *without* point *k*: every trial logs its
predictions at every point, so its misfit on the other points follows from the
log without a forward run (:func:`profshape.likelihood.evaluate_misfit`). The
trials, weighted by that likelihood,

.. math::

    w_i \propto L_{-k}(\theta_i) = \exp\left(\ln L_{-k}(\theta_i)\right),

form the refit's posterior sample (the trial log as a proposal: a BO search
puts its trials where the likelihood is high, but their density is not
corrected for, so with few trials near the optimum the weight sits on few of
them; the effective sample size :math:`(\sum w)^2/\sum w^2` is reported
with each point). Their *logged* predictions at point *k* give the predicted
observables there: the weighted mean :math:`\mu` and variance
:math:`s^2_\theta` of the model, and the predictive variance of a
measurement

.. math::

    s^2 = s^2_\theta + \sigma^2 + \sigma_\mathrm{d}^2,

with the measurement's own sigma and the model discrepancy of that observable.
The band is :math:`\mu \pm 1.645\,s` (90 % of a Gaussian; scipy.stats.norm.ppf(0.95)),
the z-score :math:`(y - \mu)/s`. A point whose features lie outside the range
of the other points (any operating-point field that varies across the data,
or a closure feature) is flagged as an extrapolation, and so is a point at
zero background pressure (space) when the others have a pressure.

Writes ``validation.parquet`` (one row per held-out measured value) and
``validation.json`` (summary) into the run folder.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .data import DataSet
from .exceptions import InputDataError
from .forward.base import Prediction
from .likelihood import LikelihoodSettings, evaluate_misfit, measured_profiles

__all__ = ["BAND_Z_90", "VALIDATION_FILES", "print_validation", "validate_run",
           "validation_rows"]

#: Half-width of the central 90 % interval of a standard Gaussian, scipy.stats.norm.ppf(0.95).
BAND_Z_90 = 1.6448536269514722
#: Files written into the run folder.
VALIDATION_FILES = ("validation.parquet", "validation.json")
_FIELDS = ("discharge_voltage_V", "anode_mass_flow_kg_s", "magnetic_field_scale",
           "background_pressure_Pa", "background_temperature_K")


def _predictions(text: Any) -> dict[str, Prediction] | None:
    try:
        raw = json.loads(text) if isinstance(text, str) else None
    except ValueError:
        return None
    if not isinstance(raw, dict):
        return None
    try:
        return {str(lab): Prediction.from_json_dict(d) for lab, d in raw.items()}
    except (TypeError, ValueError, AttributeError):
        return None


def _extrapolation(dataset: DataSet, k: int, closure: Any = None) -> str:
    """Why point ``k`` lies outside the other points' conditions ('' when inside)."""
    held = dataset[k].point
    others = [p.point for i, p in enumerate(dataset) if i != k]
    reasons = []
    for name in _FIELDS:
        values = np.array([getattr(p, name) for p in others], dtype=float)
        v = float(getattr(held, name))
        lo, hi = float(values.min()), float(values.max())
        tol = 1e-9 * max(abs(lo), abs(hi), 1e-300)
        if name == "background_pressure_Pa" and v == 0.0 and hi > 0.0:
            reasons.append("zero background pressure (space), the others at a facility pressure")
        elif v < lo - tol or v > hi + tol:
            reasons.append(f"{name} = {v:.4g} outside the other points' [{lo:.4g}, {hi:.4g}]")
    if closure is not None:
        try:
            bound = closure.closure.bind(closure.family, others)
            why = bound.extrapolation_reason(held)
        except InputDataError as exc:  # a feature constant over the others
            why = f"closure cannot be normalised without {held.label}: {exc}"
        if why:
            reasons.append(f"closure: {why}")
    return "; ".join(dict.fromkeys(reasons))


def _weights(loglike: np.ndarray) -> np.ndarray:
    w = np.exp(loglike - np.max(loglike))
    return w / w.sum()


def _row(w: np.ndarray, common: dict[str, Any], name: str, z: float, y: float, sigma: float,
         values: np.ndarray, disc_sd: float) -> dict[str, Any]:
    """One held-out value: weighted prediction, its 90 % band, error and z-score."""
    mu = float(np.sum(w * values))
    var_model = float(np.sum(w * (values - mu) ** 2))
    sd = math.sqrt(var_model + sigma**2 + disc_sd**2)
    zscore = (y - mu) / sd
    return {**common, "observable": name, "z_m": z, "measured": y, "sigma": sigma,
            "predicted": mu, "model_sd": math.sqrt(var_model),
            "band_low": mu - BAND_Z_90 * sd, "band_high": mu + BAND_Z_90 * sd,
            "error": mu - y, "relative_error": (mu - y) / abs(y) if y != 0 else math.nan,
            "z_score": zscore, "inside_90": bool(abs(zscore) <= BAND_Z_90)}


def validation_rows(dataset: DataSet, trial_predictions: Sequence[Mapping[str, Prediction]],
                    likelihood: LikelihoodSettings | None = None, *, closure: Any = None,
                    discrepancy_sigma_m_s: Sequence[float | None] | None = None
                    ) -> tuple[pd.DataFrame, dict[str, Any]]:
    """Leave-one-point-out rows and summary from logged trial predictions.

    Parameters
    ----------
    dataset : DataSet
        At least three operating points.
    trial_predictions : list of mapping of label to Prediction
        One entry per successful trial: its predictions at every point.
    likelihood : LikelihoodSettings, optional
    closure : BoundClosure, optional
        The problem's closure (its features flag extrapolations).
    discrepancy_sigma_m_s : list of float or None, optional
        Per trial: its fitted ion-velocity discrepancy, if the problem fits one.

    Returns
    -------
    (DataFrame, dict)
        Rows ``label, observable, z_m, measured, sigma, predicted, model_sd,
        band_low, band_high, error, relative_error, z_score, inside_90,
        extrapolation, extrapolation_reason, effective_sample_size``; and
        the summary (see :func:`validate_run`).
    """
    likelihood = likelihood or LikelihoodSettings()
    if len(dataset) < 3:
        raise InputDataError(
            f"validation: leave-one-point-out needs at least 3 operating points; the run has "
            f"{len(dataset)} ({dataset.labels}). Fix: calibrate on more points.")
    if not trial_predictions:
        raise InputDataError("validation: the trial log has no successful trial with stored "
                             "predictions; run (or resume) the calibration first.")
    disc = list(discrepancy_sigma_m_s or [None] * len(trial_predictions))
    rows: list[dict[str, Any]] = []
    per_point: dict[str, dict[str, Any]] = {}
    for k, held in enumerate(dataset):
        label = held.label
        reduced = DataSet([p for i, p in enumerate(dataset) if i != k])
        ll, used = [], []
        for j, preds in enumerate(trial_predictions):
            m = evaluate_misfit(reduced, preds, likelihood, discrepancy_sigma_m_s=disc[j])
            pk = preds.get(label)
            if m.ok and pk is not None and pk.ok:
                ll.append(m.log_likelihood)
                used.append(j)
        if not used:
            raise InputDataError(f"validation: no trial has usable predictions at {label!r} and "
                                 "the other points.")
        w = _weights(np.array(ll))
        ess = float(1.0 / np.sum(w**2))
        reason = _extrapolation(dataset, k, closure)
        per_point[label] = {"effective_sample_size": ess, "n_trials": len(used),
                            "best_trial_index": int(used[int(np.argmax(w))]),
                            "extrapolation": bool(reason), "extrapolation_reason": reason}
        best_disc = disc[used[int(np.argmax(w))]]

        common = {"label": label, "extrapolation": bool(reason),
                  "extrapolation_reason": reason, "effective_sample_size": ess}
        for meas in measured_profiles(held):
            name = meas.observable
            vals = []
            for j in used:
                p = trial_predictions[j][label]
                prof = p.profile(name)
                vals.append(None if prof is None or p.z_m is None
                            else np.interp(meas.z_m, p.z_m, prof))
            if any(v is None for v in vals):
                continue  # the model gave no such profile: nothing to validate
            arr = np.array(vals)
            d_sd = (likelihood.profile_discrepancy_sigma(name) if name != "ion_velocity"
                    or best_disc is None else float(best_disc))
            for i, z in enumerate(meas.z_m):
                rows.append(_row(w, common, name, float(z), float(meas.value[i]),
                                 float(meas.sigma[i]), arr[:, i], d_sd))
        for name, obs in held.scalars.items():
            vals_s = [trial_predictions[j][label].scalars.get(name) for j in used]
            if any(v is None for v in vals_s):
                continue
            rel = likelihood.scalar_discrepancy.get(name, likelihood.scalar_discrepancy_relative)
            rows.append(_row(w, common, name, math.nan, obs.value, obs.sigma,
                             np.array(vals_s, dtype=float), rel * abs(obs.value)))
    table = pd.DataFrame(rows)
    summary: dict[str, Any] = {
        "method": "leave-one-point-out; trials re-scored on the other points from the trial "
                  "log (no new forward runs), likelihood-weighted; band = mean +- 1.645 sd with "
                  "sd^2 = weighted model variance + sigma^2 + discrepancy^2",
        "points": per_point,
        "coverage_90": float(table["inside_90"].mean()) if len(table) else math.nan,
        "n_values": len(table),
    }
    for name in ("thrust", "discharge_current"):
        sel = table[table["observable"] == name] if len(table) else table
        summary[f"mape_{name}_percent"] = (float(np.median(np.abs(sel["relative_error"]))) * 100
                                           if len(sel) else None)
    if len(table):
        summary["coverage_90_by_observable"] = {
            str(k): float(v) for k, v in table.groupby("observable")["inside_90"].mean().items()}
        summary["extrapolated_points"] = sorted(lab for lab, v in per_point.items()
                                                if v["extrapolation"])
    return table, summary


def validate_run(folder: str | Path) -> dict[str, Any]:
    """Leave-one-operating-point-out validation of the calibration in ``folder``.

    Parameters
    ----------
    folder : path
        Output folder of ``profshape calibrate`` / ``profshape demo``.

    Returns
    -------
    dict
        The summary also written to ``validation.json``: ``mape_thrust_percent``
        and ``mape_discharge_current_percent`` (median absolute percentage error
        of the held-out predictions, None without such data), ``coverage_90``
        (fraction of held-out values inside their 90 % band), per-observable
        coverage, per point the effective sample size and extrapolation flag,
        and ``files``.

    Raises
    ------
    InputDataError
        Not a run folder, fewer than three points, or no usable trial.
    """
    from .trials import read_trials
    from .workflow import build_calibration, config_from_folder
    from .workflow.layout import TRIALS_FILE

    out = Path(folder)
    cfg = config_from_folder(out)
    cal = build_calibration(cfg, out, progress=False)
    problem = cal.problem
    trials = read_trials(out / TRIALS_FILE)
    ok = trials[trials["status"] == "ok"] if "status" in trials else trials.iloc[:0]
    preds: list[dict[str, Prediction]] = []
    disc: list[float | None] = []
    for _, row in ok.iterrows():
        p = _predictions(row.get("predictions"))
        if p is None:
            continue
        preds.append(p)
        if problem.fit_discrepancy:
            coeffs = [float(row[n]) for n in problem.names]
            disc.append(problem.discrepancy_sigma_m_s(coeffs))
        else:
            disc.append(None)
    table, summary = validation_rows(problem.dataset, preds, problem.likelihood,
                                     closure=problem.closure, discrepancy_sigma_m_s=disc)
    table.to_parquet(out / VALIDATION_FILES[0], index=False)
    summary["files"] = [str(out / f) for f in VALIDATION_FILES]
    (out / VALIDATION_FILES[1]).write_text(json.dumps(summary, indent=2, default=float),
                                           encoding="utf-8")
    return summary


def print_validation(s: Mapping[str, Any]) -> None:
    """Print a validation summary (of :func:`validate_run`)."""
    fmt = (lambda v: "n/a" if v is None else f"{v:.2f} %")  # noqa: E731
    print(f"leave-one-point-out over {len(s['points'])} points, {s['n_values']} held-out values")
    print(f"median abs. error: thrust {fmt(s['mape_thrust_percent'])}, discharge current "
          f"{fmt(s['mape_discharge_current_percent'])}")
    print(f"90 % band coverage: {s['coverage_90']:.2f}")
    for lab, info in s["points"].items():
        flag = f"  EXTRAPOLATION: {info['extrapolation_reason']}" if info["extrapolation"] else ""
        print(f"  {lab}: effective sample size {info['effective_sample_size']:.1f}{flag}")
    print(f"written: {', '.join(s['files'])}")
