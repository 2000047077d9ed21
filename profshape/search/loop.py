"""Run a search on a calibration problem: forward runs on an executor, a trial log.

:func:`run_search` proposes trials with :class:`~profshape.search.Search`,
runs every operating point of every trial as its own task on a
:class:`concurrent.futures.Executor` (so the points of one trial and the
trials of one batch run in parallel), judges each finished trial with
``problem.outcome`` and appends it to the parquet trial log
(:mod:`profshape.trials`) as soon as it is finished.

A forward function that takes its worker process with it (``os._exit``, a
segfault) breaks a :class:`~concurrent.futures.ProcessPoolExecutor`: every
task in flight on it ends with
:class:`~concurrent.futures.process.BrokenProcessPool`. Those trials are
logged as failed ("worker process died: ..."); a pool that ``run_search``
made itself is then replaced by a fresh one and the search goes on, while a
broken executor passed in by the caller ends the search with a
:class:`~profshape.exceptions.ForwardModelError` once every finished trial is
logged.
"""

from __future__ import annotations

import math
import os
import time
from collections.abc import Callable
from concurrent.futures import FIRST_COMPLETED, BrokenExecutor, Executor, Future, wait
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._version import __version__
from ..exceptions import ConfigError, ForwardModelError
from ..fan_out import WORKER_DIED, prediction_of, submit_profiles
from ..forward.base import Prediction
from ..trials import TrialLog, reason_signature, trial_row
from .bounds import BoundHit, warn_on_bounds
from .engine import Observation, Proposal, Search
from .progress import SearchProgress
from .settings import SearchSettings

__all__ = ["MAX_SAME_FAILURES", "REPEATED_FAILURE", "SearchResult", "run_search"]


@dataclass(frozen=True)
class SearchResult:
    """What a search found.

    Attributes
    ----------
    trials : pandas.DataFrame
        The trial log (see :mod:`profshape.trials` for the columns).
    best_coefficients : dict of str to float or None
        Coefficients (physical units) of the best successful trial.
    best_reduced_chi2 : float
        Its reduced chi-square (``inf`` when no trial succeeded).
    best_trial : int or None
        Its trial index.
    n_trials : int
        Finished trials.
    n_failed : int
        Finished trials whose forward runs failed.
    stop_reason : str
        ``"budget"``, ``"target"``, ``"patience"`` or ``"repeated_failure"``
        (``max_same_failures`` trials in a row failed for the same reason).
    log_path : Path
        The trial log.
    stop_detail : str
        For ``"repeated_failure"``: the reason those trials failed.
    on_bounds : tuple of BoundHit
        Coefficients of the best trial within 1 % of a bound of the search
        range (:mod:`profshape.search.bounds`; a
        :class:`~profshape.exceptions.BoundWarning` names each); empty when
        none. ``[h.to_dict() for h in on_bounds]`` is JSON-ready.
    """

    trials: pd.DataFrame
    best_coefficients: dict[str, float] | None
    best_reduced_chi2: float
    best_trial: int | None
    n_trials: int
    n_failed: int
    stop_reason: str
    log_path: Path
    stop_detail: str = ""
    on_bounds: tuple[BoundHit, ...] = ()


@dataclass
class _Running:
    proposal: Proposal
    source: str
    futures: dict[str, Future]
    started_at: datetime
    t0: float
    coefficients: np.ndarray
    done: dict[str, Prediction] = field(default_factory=dict)


def _now() -> datetime:
    return datetime.now(UTC)


#: Default of ``run_search(max_same_failures=...)`` (common practice, no source).
MAX_SAME_FAILURES = 10
#: Stop reason after ``max_same_failures`` failures in a row with one reason.
REPEATED_FAILURE = "repeated_failure"


class _SameFailures:
    """Counts trials in a row that failed for the same reason."""

    def __init__(self, limit: int | None):
        self.limit = limit
        self.count = 0
        self.signature = ""
        self.detail = ""

    def add(self, ok: bool, reason: str) -> None:
        if ok:
            self.count = 0
            return
        sig = reason_signature(reason)
        if sig == self.signature:
            self.count += 1
        else:
            self.signature, self.count = sig, 1
        self.detail = reason

    def reason(self) -> str | None:
        if self.limit is not None and self.count >= self.limit:
            return REPEATED_FAILURE
        return None


def _row(problem: Any, run: _Running, outcome: Any, finished_at: datetime, seed: int
         ) -> dict[str, Any]:
    row: dict[str, Any] = {"trial": run.proposal.trial, "batch": run.proposal.batch}
    row.update(trial_row(problem, run.coefficients, run.proposal.u, status=outcome.status,
                         reason=outcome.reason, misfit=outcome.misfit,
                         predictions=outcome.predictions, source=run.source, seed=seed,
                         wall_time_s=time.perf_counter() - run.t0))
    row.update(started_at=run.started_at, finished_at=finished_at, version=__version__)
    return row


class _ExecutorBroke(Exception):
    """Internal: the caller's executor is broken (carries the original error)."""


class _Runner:
    """Submits trials point by point and collects finished trials.

    Parameters
    ----------
    problem : CalibrationProblem
    executor : Executor
        Where the forward runs go.
    renew : callable or None
        Makes a fresh executor after this one broke (``None``: the executor
        belongs to the caller and is not replaced).
    """

    def __init__(self, problem: Any, executor: Executor,
                 renew: Callable[[], Executor] | None = None):
        self.problem = problem
        self.executor = executor
        self.renew = renew
        self.points = {p.label: p for p in problem.dataset.operating_points}
        self.running: dict[int, _Running] = {}
        self.broken: BaseException | None = None
        self.n_replaced = 0

    def submit(self, proposal: Proposal, source: str) -> None:
        """Submit every point of a trial (on a fresh pool if the current one broke).

        Raises
        ------
        _ExecutorBroke
            If the caller's executor is broken.
        """
        c = np.array([proposal.coefficients[n] for n in self.problem.names])
        profiles = self.problem.profiles(c)  # the coefficients are checked here, once
        for attempt in range(2):
            try:
                futures = submit_profiles(self.executor, self.problem.forward_model, profiles,
                                          self.points)
            except BrokenExecutor as exc:
                self.broken = exc
                if self.renew is None or attempt == 1:
                    raise _ExecutorBroke(exc) from exc
                self._replace()
                continue
            break
        self.running[proposal.trial] = _Running(
            proposal, source, futures, _now(), time.perf_counter(), c
        )

    def _replace(self) -> None:
        """Shut the broken pool down (so all its futures are settled) and start a new one."""
        # no cancel_futures: the broken pool's manager thread fails every task itself
        if self.renew is None:
            raise RuntimeError("the worker pool broke and this campaign has no way to renew it")
        self.executor.shutdown(wait=True)
        self.executor = self.renew()
        self.broken = None
        self.n_replaced += 1

    def wait_finished(self) -> list[tuple[_Running, Any, datetime]]:
        """Block until at least one trial has all its points done."""
        finished = []
        while True:
            for trial, run in list(self.running.items()):
                for lab, fut in run.futures.items():
                    if lab not in run.done and fut.done():
                        if not fut.cancelled() and isinstance(fut.exception(), BrokenExecutor):
                            self.broken = fut.exception()
                        run.done[lab] = prediction_of(fut)
                if len(run.done) == len(run.futures):
                    del self.running[trial]
                    preds = {lab: run.done[lab] for lab in run.futures}
                    outcome = self.problem.outcome(run.coefficients, preds,
                                                   time.perf_counter() - run.t0)
                    finished.append((run, outcome, _now()))
            if self.broken is not None and self.renew is not None:
                # every task of a broken pool ends in BrokenProcessPool; shutting the pool
                # down settles them all, so the next sweep collects those trials
                self._replace()
                continue
            if finished:
                return sorted(finished, key=lambda f: f[0].proposal.trial)
            pending = [f for r in self.running.values() for f in r.futures.values()
                       if not f.done()]
            if not pending:
                continue
            wait(pending, return_when=FIRST_COMPLETED)


def _sidecar(search: Search, settings: SearchSettings, problem: Any,
             stop_reason: str | None) -> dict[str, Any]:
    return {
        "names": list(problem.names),
        "labels": list(problem.dataset.labels),
        "settings": settings.to_dict(),
        "state": search.state(),
        "warm_start": search.warm_start(),
        "proposal_kinds": {str(t): k for t, k in sorted(search.proposal_kinds.items())},
        "in_flight": [
            {"trial": p.trial, "batch": p.batch, "source": p.source, "u": p.u.tolist()}
            for p in search.pending
        ],
        "stop_reason": stop_reason,
    }


def _restore(search: Search, log: TrialLog, settings: SearchSettings, problem: Any) -> None:
    df = log.load()
    side = log.read_sidecar()
    if list(side.get("names", [])) != list(problem.names):
        raise ConfigError(
            f"cannot resume {str(log.path)!r}: it searched {side.get('names')}, the problem "
            f"searches {list(problem.names)}. Use a new log path."
        )
    old_seed = side.get("settings", {}).get("seed")
    if old_seed != settings.seed:
        raise ConfigError(
            f"cannot resume {str(log.path)!r}: it ran with seed={old_seed}, the settings give "
            f"seed={settings.seed}; resume with the same seed."
        )
    finished = []
    done = set()
    died = []
    for row in df.to_dict(orient="records"):
        if row["status"] != "ok" and WORKER_DIED in str(row.get("error", "")):
            died.append(row)  # lost with its worker, not a result of the model: run it again
            continue
        u = np.array([row[f"u__{n}"] for n in problem.names], dtype=float)
        ok = row["status"] == "ok"
        value = float(row["reduced_chi2"]) if ok else math.nan
        outputs = None
        if ok and search.layout is not None:
            outputs = search.layout.vector_from_json(row.get("predictions"))
        finished.append(Observation(int(row["trial"]), int(row["batch"]), str(row["source"]),
                                    u, value, ok, outputs))
        done.add(int(row["trial"]))
    in_flight = []
    if died:
        log.drop_trials(int(r["trial"]) for r in died)
        for row in died:
            u = np.array([row[f"u__{n}"] for n in problem.names], dtype=float)
            in_flight.append(Proposal(int(row["trial"]), int(row["batch"]), str(row["source"]), u,
                                      search._coefficients(u)))
            done.add(int(row["trial"]))
    for p in side.get("in_flight", []):
        if int(p["trial"]) in done:
            continue
        u = np.asarray(p["u"], dtype=float)
        in_flight.append(Proposal(int(p["trial"]), int(p["batch"]), str(p["source"]), u,
                                  search._coefficients(u)))
    search.restore(finished, in_flight, side["state"], side.get("warm_start"),
                   side.get("proposal_kinds"))


def run_search(
    problem: Any,
    settings: SearchSettings,
    log_path: str | os.PathLike[str],
    executor: Executor | None = None,
    resume: bool = False,
    max_same_failures: int | None = MAX_SAME_FAILURES,
) -> SearchResult:
    """Calibrate a problem by Bayesian optimisation.

    Parameters
    ----------
    problem : CalibrationProblem
        Shape family, data, forward model and likelihood.
    settings : SearchSettings
        Budget, batch size, stop rules, seed, ...
    log_path : path-like
        The parquet trial log to write (its JSON sidecar goes beside it).
    executor : concurrent.futures.Executor, optional
        Where the forward runs go; default a local process pool of
        ``settings.workers`` processes (closed at the end). Use
        :func:`profshape.executors.dask_executor` for a dask cluster, or
        :class:`profshape.executors.InlineExecutor` to run in this process.
    resume : bool, default=False
        Continue from an existing log: reuse its finished trials, re-run those
        in flight at the interruption (source ``"resumed"``) and go on with
        the same seed stream. Without an existing log, start afresh. Trials
        whose worker process died are run again.
    max_same_failures : int or None, default=MAX_SAME_FAILURES
        Stop (reason ``"repeated_failure"``) once this many trials in a row
        failed for the same reason (work folders and ids aside): a typo'd
        observable name or a broken program would fail every trial. ``None``
        never stops for this.

    Returns
    -------
    SearchResult

    Raises
    ------
    ConfigError
        If the log exists and ``resume`` is False, or the log belongs to a
        search with other parameters or another seed.
    ForwardModelError
        If the forward model cannot be sent to the executor.

    Warns
    -----
    BoundWarning
        When a coefficient of the best trial is within 1 % of a bound (the
        message names the bound to widen; also in ``SearchResult.on_bounds``).
    """
    from ..executors import refuse_in_spawn_bootstrap

    refuse_in_spawn_bootstrap()  # a spawned worker re-running an unguarded script: say so
    if not isinstance(settings, SearchSettings):
        raise ConfigError(f"settings must be a SearchSettings; got {type(settings).__name__}.")
    log_path = Path(log_path)
    search = Search(problem, settings)
    log = TrialLog(log_path, problem.names, problem.dataset.labels)
    if log_path.exists():
        if not resume:
            raise ConfigError(
                f"trial log {str(log_path)!r} already exists; pass resume=True to continue it "
                "or choose another log_path."
            )
        _restore(search, log, settings, problem)
    own = executor is None
    renew = None
    if own:
        from ..executors import local_executor

        def renew() -> Executor:
            return local_executor(settings.workers)

        executor = renew()
    assert executor is not None
    runner = _Runner(problem, executor, renew)
    done_best = search.best()
    progress = SearchProgress(settings.budget, settings.progress, initial=search.n_finished,
                              best=math.inf if done_best is None else done_best.value,
                              n_failed=search.n_failed)
    stop_reason: str | None = None
    same = _SameFailures(max_same_failures)

    def collect() -> None:
        for run, outcome, finished_at in runner.wait_finished():
            row = _row(problem, run, outcome, finished_at, settings.seed)
            value = row["reduced_chi2"]
            log.append(row)  # log first, then learn: a trial the search rejects is still kept
            search.tell(run.proposal.trial, value if outcome.ok else None, ok=outcome.ok,
                        outputs=search.outputs_of(outcome.predictions) if outcome.ok else None)
            progress.update(outcome.ok, value, search.kind_of(run.proposal.trial, run.source))
            same.add(outcome.ok, row["error"])
        log.write_sidecar(_sidecar(search, settings, problem, None))

    try:
        log.write_sidecar(_sidecar(search, settings, problem, None))
        try:
            for p in search.pending:  # in flight at the interruption
                runner.submit(p, "resumed")
            while True:
                stop_reason = search.stop_reason() or same.reason()
                if stop_reason is None:
                    room = settings.workers - len(runner.running)
                    if settings.asynchronous and room > 0:
                        proposals = search.ask(room)
                    elif not runner.running:
                        proposals = search.ask(settings.batch_size)
                    else:
                        proposals = []
                    if proposals:
                        log.write_sidecar(_sidecar(search, settings, problem, None))
                        for p in proposals:
                            runner.submit(p, p.source)
                if not runner.running:
                    break
                collect()
                if runner.broken is not None:  # the caller's executor
                    raise _ExecutorBroke(runner.broken)
        except _ExecutorBroke as broke:
            while runner.running:  # a broken executor fails every task it holds
                collect()
            cause = broke.args[0]
            raise ForwardModelError(
                f"the executor passed to run_search broke ({type(cause).__name__}: {cause}); "
                "usually a forward run ended its worker process (os._exit, a segfault). "
                f"The {search.n_finished} finished trials are in {str(log_path)!r}; start a "
                "new executor and resume (resume=True), let run_search make its own process "
                "pool (it replaces a broken one), or wrap crash-prone code in "
                "profshape.forward.external.ExternalModel."
            ) from cause
        stop_reason = same.reason() or search.stop_reason() or "budget"
        log.write_sidecar(_sidecar(search, settings, problem, stop_reason))
    finally:
        progress.close()
        if own:
            runner.executor.shutdown(wait=True, cancel_futures=True)
        log.close()
    best = search.best()
    hits = tuple(search.on_bounds())
    warn_on_bounds(hits)
    return SearchResult(
        trials=log.frame(),
        best_coefficients=search.best_coefficients(),
        best_reduced_chi2=math.inf if best is None else best.value,
        best_trial=None if best is None else best.trial,
        n_trials=search.n_finished,
        n_failed=search.n_failed,
        stop_reason=stop_reason,
        log_path=log_path,
        stop_detail=same.detail if stop_reason == REPEATED_FAILURE else "",
        on_bounds=hits,
    )
