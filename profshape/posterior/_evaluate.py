"""Running posterior draws through the real forward model (private helpers)."""

from __future__ import annotations

import json
import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import InputDataError

__all__: list[str] = []


@dataclass
class DrawRun:
    """Outcome of one forward evaluation of a coefficient vector (all points)."""

    status: str
    reason: str = ""
    log_likelihood: float = -math.inf
    chi2: float = math.inf
    reduced_chi2: float = math.inf
    n_data: int = 0
    predictions: dict[str, Any] = field(default_factory=dict)
    per_point: dict[str, float] = field(default_factory=dict)
    per_observable: dict[str, float] = field(default_factory=dict)
    wall_time_s: float = 0.0

    @property
    def ok(self) -> bool:
        return self.status == "ok" and math.isfinite(self.log_likelihood)


def _from_outcome(outcome: Any) -> DrawRun:
    misfit = getattr(outcome, "misfit", None)
    status = str(getattr(outcome, "status", "failed"))
    run = DrawRun(
        status=status,
        reason=str(getattr(outcome, "reason", "") or ""),
        predictions=dict(getattr(outcome, "predictions", {}) or {}),
        wall_time_s=float(getattr(outcome, "wall_time_s", 0.0) or 0.0),
    )
    if misfit is not None:
        run.log_likelihood = float(misfit.log_likelihood)
        run.chi2 = float(misfit.chi2)
        run.reduced_chi2 = float(misfit.reduced_chi2)
        run.n_data = int(misfit.n_data)
        run.per_point = dict(getattr(misfit, "per_point", {}) or {})
        run.per_observable = dict(getattr(misfit, "per_observable", {}) or {})
        if status == "ok" and not bool(getattr(misfit, "ok", True)):
            run.status = "failed"
            run.reason = run.reason or str(getattr(misfit, "reason", ""))
    if run.status == "ok" and not math.isfinite(run.log_likelihood):
        run.status = "failed"
        run.reason = run.reason or "non-finite log-likelihood"
    return run


def _safe_evaluate(problem: Any, coefficients: np.ndarray) -> DrawRun:
    start = time.perf_counter()
    try:
        return _from_outcome(problem.evaluate(np.asarray(coefficients, dtype=float)))
    except InputDataError:
        raise
    except Exception as exc:  # a forward failure must not escape; record it
        return DrawRun(status="failed", reason=f"{type(exc).__name__}: {exc}",
                       wall_time_s=time.perf_counter() - start)


def evaluate_many(
    problem: Any, coefficients: np.ndarray, executor: Any = None
) -> list[DrawRun]:
    """Evaluate each row of ``coefficients`` (n, d) with ``problem.evaluate``.

    With an ``executor`` (anything with ``submit`` returning futures with
    ``result()``: concurrent.futures or a dask client), the rows run in
    parallel, one task per row.
    """
    rows = np.atleast_2d(np.asarray(coefficients, dtype=float))
    if executor is None:
        return [_safe_evaluate(problem, r) for r in rows]
    futures = [executor.submit(_safe_evaluate, problem, r) for r in rows]
    out = []
    for fut in futures:
        try:
            out.append(fut.result())
        except InputDataError:
            raise
        except Exception as exc:
            out.append(DrawRun(status="failed", reason=f"{type(exc).__name__}: {exc}"))
    return out


def _prediction_json(predictions: dict[str, Any]) -> str:
    payload = {}
    for label, pred in predictions.items():
        if pred is None or getattr(pred, "status", "") != "ok":
            continue
        z = getattr(pred, "z_m", None)
        v = getattr(pred, "ion_velocity_m_s", None)
        payload[label] = {
            "z_m": [] if z is None else np.asarray(z, dtype=float).tolist(),
            "ion_velocity_m_s": [] if v is None else np.asarray(v, dtype=float).tolist(),
            "scalars": {k: float(x) for k, x in (getattr(pred, "scalars", {}) or {}).items()},
        }
        if getattr(pred, "profiles", None):  # profile observables besides the ion velocity
            payload[label]["profiles"] = {k: np.asarray(x, dtype=float).tolist()
                                          for k, x in pred.profiles.items()}
    return json.dumps(payload)


def runs_to_frame(
    problem: Any,
    coefficients: np.ndarray,
    runs: Sequence[DrawRun],
    source: str,
    seed: int | None = None,
) -> pd.DataFrame:
    """Forward runs as rows in the trial-log column layout (``trial`` left to the log)."""
    coefficients = np.atleast_2d(np.asarray(coefficients, dtype=float))
    names = list(problem.names)
    unit = np.asarray(problem.to_unit(coefficients), dtype=float)
    records = []
    for i, run in enumerate(runs):
        rec: dict[str, Any] = {
            "source": source,
            "status": run.status,
            "reduced_chi2": run.reduced_chi2 if run.ok else math.nan,
            "chi2": run.chi2 if run.ok else math.nan,
            "n_data": run.n_data,
            "log_likelihood": run.log_likelihood if run.ok else math.nan,
            "wall_time_s": run.wall_time_s,
            "error": run.reason,
            "seed": -1 if seed is None else int(seed),
            "predictions": _prediction_json(run.predictions),
        }
        for label, value in run.per_point.items():
            rec[f"misfit__{label}"] = float(value)
        for key, value in run.per_observable.items():
            rec["misfit__" + str(key).replace("/", "__")] = float(value)
        for j, name in enumerate(names):
            rec[name] = float(coefficients[i, j])
            rec[f"u__{name}"] = float(unit[i, j])
        records.append(rec)
    return pd.DataFrame.from_records(records)
