"""Running posterior draws through the real forward model (private helpers)."""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import InputDataError
from ..trials import trial_row
from .protocol import PosteriorProblem

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


def _safe_evaluate(problem: PosteriorProblem, coefficients: np.ndarray) -> DrawRun:
    start = time.perf_counter()
    try:
        return _from_outcome(problem.evaluate(np.asarray(coefficients, dtype=float)))
    except InputDataError:
        raise
    except Exception as exc:  # a forward failure must not escape; record it
        return DrawRun(status="failed", reason=f"{type(exc).__name__}: {exc}",
                       wall_time_s=time.perf_counter() - start)


def evaluate_many(
    problem: PosteriorProblem, coefficients: np.ndarray, executor: Any = None
) -> list[DrawRun]:
    """Evaluate each row of ``coefficients`` (n, d) through the real forward model.

    With an ``executor`` (anything with ``submit`` returning futures with
    ``result()``: concurrent.futures or a dask client), every point of every
    row is submitted at once (:mod:`profshape.fan_out`), as the search does.
    """
    rows = np.atleast_2d(np.asarray(coefficients, dtype=float))
    if executor is None:
        return [_safe_evaluate(problem, r) for r in rows]
    return [_from_outcome(o) for o in problem.evaluate_many(rows, executor)]


def runs_to_frame(
    problem: PosteriorProblem,
    coefficients: np.ndarray,
    runs: Sequence[DrawRun],
    source: str,
    seed: int | None = None,
) -> pd.DataFrame:
    """Forward runs as rows of the trial log (:func:`profshape.trials.trial_row`; ``trial``
    left to the log); failed runs are kept, with their status, reason and predictions."""
    coefficients = np.atleast_2d(np.asarray(coefficients, dtype=float))
    unit = np.atleast_2d(np.asarray(problem.to_unit(coefficients), dtype=float))
    records = [trial_row(problem, coefficients[i], unit[i], status=run.status, reason=run.reason,
                         misfit=run, predictions=run.predictions, source=source, seed=seed,
                         wall_time_s=run.wall_time_s)
               for i, run in enumerate(runs)]
    return pd.DataFrame.from_records(records)
