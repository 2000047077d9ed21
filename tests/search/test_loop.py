"""run_search: trial log, failures, user points, resume, dask."""

from __future__ import annotations

import json
import os
from concurrent.futures import Future, ThreadPoolExecutor
from concurrent.futures.process import BrokenProcessPool

import numpy as np
import pandas as pd
import pytest

from profshape import __version__
from profshape.exceptions import ConfigError, ForwardModelError
from profshape.executors import InlineExecutor, dask_executor
from profshape.forward.base import ForwardModel
from profshape.problem import CalibrationProblem
from profshape.search import SearchSettings, run_search
from profshape.search.design import sobol_points
from profshape.trials import read_predictions, read_trials, sidecar_path

SETTINGS = dict(num_restarts=2, raw_samples=32, mc_samples=32, progress=False)


def test_log_columns_user_points_and_failures(problem, tmp_path):
    user = {"log10_inner_level": -2.5, "log10_outer_level": -1.0,
            "transition_z_m": 0.025, "transition_width_m": 0.003}
    settings = SearchSettings(budget=10, n_initial=5, initial_points=[user], seed=1, **SETTINGS)
    log = tmp_path / "trials.parquet"
    res = run_search(problem, settings, log, executor=InlineExecutor())
    df = pd.read_parquet(log)
    assert len(df) == 10 == res.n_trials
    assert list(df.columns[:8]) == ["trial", "batch", "source", "status", "reduced_chi2", "chi2",
                                    "n_data", "log_likelihood"]
    for name in problem.names:
        assert name in df and f"u__{name}" in df
    for col in ("misfit__300V", "misfit__250V", "misfit__300V__ion_velocity", "wall_time_s",
                "started_at", "finished_at", "error", "seed", "version", "predictions"):
        assert col in df, col
    assert str(df["started_at"].dtype).endswith("UTC]")
    assert (df["version"] == __version__).all()
    row0 = df.sort_values("trial").iloc[0]
    assert row0["source"] == "user" and row0["transition_z_m"] == pytest.approx(0.025)
    # the toy model raises for transition_width_m > 10.5 mm: failures are logged, with NaN
    failed = df[df["status"] != "ok"]
    assert len(failed) == res.n_failed and len(failed) >= 1
    assert failed["reduced_chi2"].isna().all() and failed["misfit__300V"].isna().all()
    assert failed["error"].str.contains("wide transition").all()
    ok = df[df["status"] == "ok"]
    assert np.isfinite(ok["reduced_chi2"]).all()
    np.testing.assert_allclose(ok["chi2"], ok["misfit__300V"] + ok["misfit__250V"], rtol=1e-10)
    preds = read_predictions(ok.iloc[0])
    assert set(preds) == {"300V", "250V"} and preds["300V"]["ion_velocity_m_s"].size == 121
    assert res.best_reduced_chi2 == pytest.approx(ok["reduced_chi2"].min())
    assert res.stop_reason == "budget"
    assert json.loads(sidecar_path(log).read_text())["stop_reason"] == "budget"
    with pytest.raises(ConfigError, match="already exists; pass resume=True"):
        run_search(problem, settings, log, executor=InlineExecutor())


class _Interrupting(InlineExecutor):
    """Runs inline, then simulates Ctrl-C at the n-th submission."""

    def __init__(self, n):
        self.n = n

    def submit(self, fn, /, *args, **kwargs) -> Future:
        self.n -= 1
        if self.n < 0:
            raise KeyboardInterrupt
        return super().submit(fn, *args, **kwargs)


def test_resume_after_interruption_reproduces_uninterrupted(problem, tmp_path):
    settings = SearchSettings(budget=10, n_initial=4, batch_size=2, seed=3, **SETTINGS)
    full = run_search(problem, settings, tmp_path / "full.parquet", executor=InlineExecutor())
    log = tmp_path / "cut.parquet"
    with pytest.raises(KeyboardInterrupt):
        # 2 points per trial: trial 6's second point never starts; trials 6 and 7 are in flight
        run_search(problem, settings, log, executor=_Interrupting(13))
    partial = read_trials(log)
    assert len(partial) == 6
    side = json.loads(sidecar_path(log).read_text())
    assert sorted(p["trial"] for p in side["in_flight"]) == [6, 7]
    res = run_search(problem, settings, log, executor=InlineExecutor(), resume=True)
    df = res.trials
    assert list(df["trial"]) == list(range(10))
    assert list(df.loc[df["trial"].isin([6, 7]), "source"]) == ["resumed", "resumed"]
    cols = [f"u__{n}" for n in problem.names] + ["reduced_chi2", "status", "batch"]
    pd.testing.assert_frame_equal(df[cols], full.trials[cols])
    assert res.best_coefficients == full.best_coefficients


def test_dask_local_cluster_and_thread_pool_batches(problem, tmp_path):
    distributed = pytest.importorskip("distributed")
    settings = SearchSettings(budget=7, n_initial=4, batch_size=2, seed=0, **SETTINGS)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        res = run_search(problem, settings, tmp_path / "dask.parquet",
                         executor=dask_executor(client))
    ref = run_search(problem, settings, tmp_path / "inline.parquet", executor=InlineExecutor())
    assert res.n_trials == 7
    cols = [f"u__{n}" for n in problem.names] + ["reduced_chi2"]
    pd.testing.assert_frame_equal(res.trials[cols], ref.trials[cols])
    # asynchronous mode on a thread pool: a free worker gets a proposal at once
    asettings = SearchSettings(budget=7, n_initial=3, n_workers=2, asynchronous=True, seed=0,
                               **SETTINGS)
    with ThreadPoolExecutor(2) as pool:
        ares = run_search(problem, asettings, tmp_path / "async.parquet", executor=pool)
    assert ares.n_trials == 7 and (ares.trials["source"] == "proposal").sum() == 4


class _KillsItsWorker(ForwardModel):
    """The toy model, except that wide transitions end the worker process outright."""

    name = "kills-its-worker"

    def __init__(self, inner):
        self.inner = inner

    def run(self, profile, point):
        if profile.coefficients["transition_width_m"] > 0.009:
            os._exit(9)  # no exception, no result: the process is gone
        return self.inner.run(profile, point)

    def grid(self, point):
        return self.inner.grid(point)


def test_worker_that_kills_itself_is_a_failed_trial_and_the_pool_is_replaced(problem, tmp_path):
    problem = CalibrationProblem(problem.family, problem.dataset,
                                 _KillsItsWorker(problem.forward_model))
    settings = SearchSettings(budget=8, n_initial=6, batch_size=2, seed=1, **SETTINGS)
    widths = problem.from_unit(sobol_points(6, problem.dim, seed=1))[:, 3]
    assert (widths > 0.009).sum() >= 1 and (widths <= 0.009).sum() >= 3  # the design hits it
    res = run_search(problem, settings, tmp_path / "log.parquet")  # its own process pool
    df = read_trials(tmp_path / "log.parquet")
    assert res.n_trials == 8 and list(df["trial"]) == list(range(8))
    assert res.stop_reason == "budget"
    died = df[df["error"].str.contains("worker process died")]
    assert len(died) >= 1 and (died["status"] == "failed").all()
    assert died["reduced_chi2"].isna().all()
    assert died["error"].str.contains("BrokenProcessPool").all()
    # every trial that asked for a wide transition died; the pool came back for the rest
    wide = df["transition_width_m"] > 0.009
    assert set(df.index[wide]) <= set(died.index)
    later = df[df["trial"] > died["trial"].max()]
    assert len(later) >= 1 and (later["status"] == "ok").any()
    assert res.best_trial in set(df.loc[df["status"] == "ok", "trial"])


class _BreakingExecutor(InlineExecutor):
    """Inline, but behaves as a ProcessPoolExecutor whose worker died at the n-th task:
    that task's future fails with BrokenProcessPool and so does every later submit
    (the documented behaviour of concurrent.futures.ProcessPoolExecutor)."""

    def __init__(self, n):
        self.n = n
        self.broken = False

    def submit(self, fn, /, *args, **kwargs) -> Future:
        if self.broken:
            raise BrokenProcessPool("A child process terminated abruptly")
        self.n -= 1
        if self.n < 0:
            self.broken = True
            future = Future()
            future.set_exception(BrokenProcessPool("A process in the process pool was "
                                                   "terminated abruptly"))
            return future
        return super().submit(fn, *args, **kwargs)


def test_callers_broken_executor_raises_after_logging_finished_trials(problem, tmp_path):
    settings = SearchSettings(budget=10, n_initial=4, batch_size=2, seed=3, **SETTINGS)
    log = tmp_path / "log.parquet"
    # 2 points per trial: tasks 0-9 are trials 0-4; task 10 (trial 5, first point) breaks
    with pytest.raises(ForwardModelError, match=r"executor passed to run_search broke "
                       r"\(BrokenProcessPool.*5 finished trials.*resume=True"):
        run_search(problem, settings, log, executor=_BreakingExecutor(10))
    df = read_trials(log)
    assert list(df["trial"]) == [0, 1, 2, 3, 4]  # nothing finished is lost
    assert (df["status"] == "ok").sum() >= 3
    side = json.loads(sidecar_path(log).read_text())
    assert sorted(p["trial"] for p in side["in_flight"]) == [5]
    # resuming on a working executor completes the budget with trial 5 re-run
    res = run_search(problem, settings, log, executor=InlineExecutor(), resume=True)
    assert res.n_trials == 10
    assert res.trials.loc[res.trials["trial"] == 5, "source"].item() == "resumed"
