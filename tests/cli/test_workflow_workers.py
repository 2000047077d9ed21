"""Workers and progress: a dask cluster losing a worker, SLURM job scripts, the spawn
bootstrapping error named, the progress bar after resume, group-readable logs."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import _workflow_model as wm  # tests/cli is on sys.path (pytest rootdir insertion)
import numpy as np
import pandas as pd
import pytest

from profshape.config import parse_config
from profshape.exceptions import ConfigError
from profshape.search import SearchSettings, run_search
from profshape.template import calibration_template

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]


# ------------------------------------------------ issue 12 bug 5: progress best after resume
def test_progress_bar_best_matches_log_after_resume(tmp_path, monkeypatch):
    from profshape.executors import InlineExecutor
    from profshape.search import loop

    problem = wm.make_problem()
    log = tmp_path / "trials.parquet"
    run_search(problem, SearchSettings(budget=4, n_initial=4, seed=0, progress=False), log,
               executor=InlineExecutor())
    first = pd.read_parquet(log)
    seen = []

    class Recording(loop.SearchProgress):
        def __init__(self, *a, **k):
            super().__init__(*a, **k)
            seen.append((self.best, self.n_failed))

    monkeypatch.setattr(loop, "SearchProgress", Recording)
    run_search(problem, SearchSettings(budget=5, n_initial=4, seed=0, progress=False), log,
               executor=InlineExecutor(), resume=True)
    ok = first[first["status"] == "ok"]
    # the bar starts from the log's best and failures, not from nothing
    assert seen[0][0] == pytest.approx(ok["reduced_chi2"].min(), rel=1e-12)
    assert seen[0][1] == int((first["status"] != "ok").sum())


# ---------------------------- issue 12 bug 4: an unguarded script's spawn failure is named
@pytest.mark.slow
def test_unguarded_script_failure_is_named(tmp_path):
    log = tmp_path / "trials.parquet"
    script = tmp_path / "calibrate_me.py"
    script.write_text(textwrap.dedent(f"""
        import sys
        sys.path.insert(0, {str(HERE)!r})
        import _workflow_model as wm
        from profshape.search import SearchSettings, run_search

        result = run_search(wm.make_problem(), SearchSettings(budget=2, n_initial=2, seed=0,
                            n_workers=2, progress=False), {str(log)!r})
        print("finished", result.n_trials, result.n_failed)
    """))
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]),
           "OMP_NUM_THREADS": "1"}
    proc = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=600,
                          env=env, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr[-3000:]
    trials = pd.read_parquet(log)
    assert len(trials) == 2 and (trials["status"] == "failed").all()
    for reason in trials["error"]:
        assert 'if __name__ == "__main__":' in reason and "calibrate_me.py" in reason
        assert "bootstrapping" in reason


# -------------------------------- issue 15 item 9: a dask cluster that loses a worker
@pytest.mark.slow
def test_local_dask_cluster_survives_a_lost_worker(tmp_path):
    from distributed import LocalCluster

    from profshape.workers import cluster_executor

    marker = tmp_path / "worker-lost.txt"
    problem = wm.make_problem(str(marker))
    log = tmp_path / "trials.parquet"
    cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                           dashboard_address=None, silence_logs=40)
    with cluster_executor(cluster) as executor:
        result = run_search(problem, SearchSettings(budget=6, n_initial=4, batch_size=2,
                                                    n_workers=2, seed=1, progress=False),
                            log, executor=executor)
    assert marker.exists()  # a worker really died mid-run
    trials = pd.read_parquet(log)
    assert sorted(trials["trial"]) == list(range(6))  # the campaign went on to its budget
    assert result.n_trials == 6
    failed = trials[trials["status"] != "ok"]
    # the lost run was re-run by the scheduler (ok) or logged with the cause, never lost
    assert all(("KilledWorker" in e) or ("executor" in e) for e in failed["error"])
    assert (trials["status"] == "ok").sum() >= 5


def _workers_config(**changes: str):
    text = calibration_template()
    for old, new in changes.items():
        assert old in text, old
        text = text.replace(old, new)
    return parse_config(text)


def test_slurm_job_script_from_the_workers_table():
    pytest.importorskip("dask_jobqueue")
    from profshape.workers import jobqueue_cluster, slots_in_flight

    cfg = _workers_config(**{'kind = "local"': 'kind = "slurm"', "cores = 1 ": "cores = 4 ",
                             'memory = "4GB"': 'memory = "8GB"',
                             'walltime = "01:00:00"': 'walltime = "02:00:00"',
                             '# queue = "normal"': 'queue = "short"',
                             "jobs = 1 ": "jobs = 3 ",
                             "job_directives = []": 'job_directives = ["--constraint=cpu"]'})
    workers = cfg.section("workers")
    assert slots_in_flight(workers) == 12
    cluster = jobqueue_cluster(workers)
    try:
        script = cluster.job_script()
    finally:
        cluster.close()
    # SLURM sbatch directives (sbatch documentation): partition, cpus, memory, time limit
    for line in ("#SBATCH -p short", "#SBATCH --cpus-per-task=4", "#SBATCH --mem=8G",
                 "#SBATCH -t 02:00:00", "#SBATCH --constraint=cpu"):
        assert line in script
    assert "--nworkers 4" in script and "--nthreads 1" in script
    # workers retire 5 minutes before the wall time (7200 s - 300 s)
    assert "--lifetime 6900s" in script


@pytest.mark.parametrize("change, key", [
    ({'kind = "local"': 'kind = "sge"'}, "workers.kind"),
    ({'walltime = "01:00:00"': 'walltime = "90 minutes"'}, "workers.walltime"),
    ({'memory = "4GB"': 'memory = "lots"'}, "workers.memory"),
    ({"jobs = 1 ": "jobs = 0 "}, "workers.jobs"),
])
def test_bad_workers_table_is_refused(change, key):
    with pytest.raises(ConfigError, match=key.replace(".", r"\.")):
        _workers_config(**change)


def test_walltime_seconds():
    from profshape.workers import walltime_seconds

    assert walltime_seconds("01:30:00") == 5400
    assert walltime_seconds("1-00:00:00") == 86400
    assert walltime_seconds("45:00") == 45 * 3600  # HH:MM


# ----------------------------------------------- issue 15 item 9: group-readable outputs
def test_trial_log_is_group_readable(tmp_path):
    from profshape.executors import InlineExecutor

    old = os.umask(0o027)
    try:
        run_search(wm.make_problem(), SearchSettings(budget=2, n_initial=2, seed=0, progress=False),
                   tmp_path / "trials.parquet", executor=InlineExecutor())
    finally:
        os.umask(old)
    for name in ("trials.parquet", "trials.parquet.json"):
        mode = (tmp_path / name).stat().st_mode & 0o777
        assert mode == 0o640, (name, oct(mode))  # 0666 less the umask 027: group may read
    json.loads((tmp_path / "trials.parquet.json").read_text())
    assert np.isfinite(pd.read_parquet(tmp_path / "trials.parquet")["reduced_chi2"]).all()


# ------------------------------------------ issue 15 item 4: stage lines and bars after the search
def test_stage_lines_count_runs_and_give_an_eta():
    import io

    from profshape.executors import InlineExecutor
    from profshape.workflow.stages import StageProgress

    trials = pd.DataFrame({"status": ["ok", "ok", "ok", "failed"],
                           "wall_time_s": [1.0, 2.0, 3.0, 50.0]})
    stream = io.StringIO()
    stages = StageProgress(trials, n_workers=2, enabled=True, stream=stream)
    assert stages.eta_s(5) == 6.0  # ceil(5 / 2) rounds x the median ok trial (2 s)
    with stages.executor("bands", 5, InlineExecutor(), "posterior draws") as ex:
        results = [ex.submit(pow, k, 2).result() for k in range(4)]
    assert results == [0, 1, 4, 9]
    text = stream.getvalue()
    assert "profshape: bands: posterior draws, up to 5 forward runs; about 6 s of forward runs" in text
    assert "profshape: bands: done in" in text and "(4 forward runs)" in text
    quiet = io.StringIO()
    with StageProgress(trials, 2, enabled=False, stream=quiet).executor("x", 3, None) as ex:
        assert ex is None
    assert quiet.getvalue() == ""
