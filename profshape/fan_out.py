"""Forward runs sent to workers: one task per operating point, collected as predictions.

The search (:func:`profshape.search.run_search`), a calibration problem's own
evaluation (:meth:`profshape.problem.CalibrationProblem.run_points`) and the
posterior's real runs (:mod:`profshape.posterior`) all send forward runs this
way, so a worker that dies, a model that cannot be pickled or a task that
returns something else is handled once:

- a dead worker process (``BrokenExecutor``) is a ``"failed"`` prediction
  whose reason starts with :data:`WORKER_DIED` (naming a spawn bootstrapping
  error when that is the cause);
- a model or profile that cannot be sent to the executor raises
  :class:`~profshape.exceptions.ForwardModelError` (every trial would fail the
  same way);
- any other executor error is a ``"failed"`` prediction with its reason.

Executors are anything with ``submit`` returning futures with ``result()``
(concurrent.futures, a dask client, :class:`profshape.executors.InlineExecutor`).
"""

from __future__ import annotations

import pickle
from collections.abc import Mapping, Sequence
from concurrent.futures import BrokenExecutor, Executor, Future
from typing import Any, Protocol

from .exceptions import ForwardModelError
from .forward.base import Prediction
from .operating_point import OperatingPoint
from .profile import AnomalousProfile

__all__ = ["WORKER_DIED", "collect_predictions", "prediction_of", "run_profiles",
           "submit_profiles"]

#: Start of the reason logged for a forward run whose worker process died.
WORKER_DIED = "worker process died"


class _Model(Protocol):
    def __call__(self, profile: AnomalousProfile, point: OperatingPoint) -> Prediction: ...


def _is_pickling_error(exc: BaseException) -> bool:
    if isinstance(exc, pickle.PicklingError):
        return True
    text = f"{type(exc).__name__}: {exc}".lower()
    return "pickl" in text and isinstance(exc, (TypeError, AttributeError, pickle.PicklingError))


def prediction_of(future: Future[Any]) -> Prediction:
    """The prediction of a finished forward-run task (see the module docstring).

    Raises
    ------
    ForwardModelError
        If the model or profile could not be sent to the executor.
    """
    try:
        out = future.result()
    except BrokenExecutor as exc:
        from .executors import spawn_bootstrap_failure

        bootstrap = spawn_bootstrap_failure()
        if bootstrap is not None:
            return Prediction.failure("failed", f"{WORKER_DIED}: {bootstrap}")
        return Prediction.failure(
            "failed",
            f"{WORKER_DIED}: {type(exc).__name__}: {exc} (a forward run in flight at the "
            "same time ended its worker process, e.g. by os._exit or a segfault; wrap "
            "crash-prone code in profshape.forward.external.ExternalModel)",
        )
    except Exception as exc:
        if _is_pickling_error(exc):
            raise ForwardModelError(
                f"the forward model or profile could not be sent to the executor ({exc}); "
                "define functions at module level, or use profshape.executors.InlineExecutor "
                "or a dask executor (cloudpickle)."
            ) from exc
        return Prediction.failure("failed", f"executor: {type(exc).__name__}: {exc}")
    if not isinstance(out, Prediction):
        return Prediction.failure("failed", f"executor returned {type(out).__name__}")
    return out


def submit_profiles(executor: Executor, model: _Model, profiles: Mapping[str, AnomalousProfile],
                    points: Mapping[str, OperatingPoint]) -> dict[str, Future[Any]]:
    """Submit one forward run per label: ``model(profiles[label], points[label])``.

    Raises
    ------
    BrokenExecutor
        If the executor is broken (the caller may replace it and submit again).
    """
    return {lab: executor.submit(model, profile, points[lab]) for lab, profile in profiles.items()}


def collect_predictions(futures: Mapping[str, Future[Any]]) -> dict[str, Prediction]:
    """Wait for each task and return its prediction, by label (see :func:`prediction_of`)."""
    return {lab: prediction_of(fut) for lab, fut in futures.items()}


def run_profiles(model: _Model, profiles: Sequence[Mapping[str, AnomalousProfile]],
                 points: Mapping[str, OperatingPoint], executor: Executor | None = None
                 ) -> list[dict[str, Prediction]]:
    """Run every profile of every trial at its point; all tasks are submitted before any wait.

    Parameters
    ----------
    model : callable
        ``model(profile, point) -> Prediction`` (a :class:`~profshape.forward.ForwardModel`).
    profiles : sequence of mapping label -> AnomalousProfile
        One mapping per trial.
    points : mapping label -> OperatingPoint
    executor : Executor, optional
        Without one, the runs are made here, in order.

    Returns
    -------
    list of dict label -> Prediction
        One per trial, in order.
    """
    if executor is None:
        return [{lab: model(p, points[lab]) for lab, p in trial.items()} for trial in profiles]
    submitted = [submit_profiles(executor, model, trial, points) for trial in profiles]
    return [collect_predictions(futures) for futures in submitted]
