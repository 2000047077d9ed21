"""Interruptions: SIGKILL at random moments (and mid log write), then resume; SIGINT.

The calibration runs in a subprocess (``_driver.py``: run_search on the cheap
deterministic problem of ``_faulty.py``, 10 % injected faults, a small sleep per run so
kills land mid-run) and is killed with ``os.kill``. After every kill the trial log must
read, keep every trial it had (unchanged), hold unique trial numbers; at the end the
trials equal those of an uninterrupted run with the same seed. A trial in flight at a
kill is re-run on resume and logged with source ``"resumed"``; since the forward model
is deterministic its result is the same, so only the ``source`` column and the
timings may differ from the uninterrupted run.
"""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import psutil
import pytest

from profshape.trials import read_trials, sidecar_path

HERE = Path(__file__).resolve().parent
DRIVER = HERE / "_driver.py"
SEED, BUDGET, SLEEP_S = 4, 12, 0.15
N_KILLS = 10
#: Columns that must match the uninterrupted run exactly.
SAME = ("trial", "batch", "status", "reduced_chi2", "chi2", "error")


class _Run:
    """A driver subprocess whose stdout lines are collected in the background."""

    def __init__(self, log: Path, executor: str, resume: bool, env: dict | None = None):
        args = [sys.executable, str(DRIVER), str(log), str(SEED), str(BUDGET), str(SLEEP_S),
                executor] + (["--resume"] if resume else [])
        # stderr to a file: a process left behind holding a pipe would block the reader
        self.err_path = log.with_name(f"stderr-{time.monotonic_ns()}.txt")
        with open(self.err_path, "w") as err:
            self.proc = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=err, text=True,
                                         env={**os.environ, **(env or {})})
        self.lines: list[str] = []
        self.ready = threading.Event()
        self._t = threading.Thread(target=self._read, daemon=True)
        self._t.start()

    def _read(self):
        for line in self.proc.stdout:
            self.lines.append(line.strip())
            if line.strip() == "ready":
                self.ready.set()
        self.ready.set()

    def descendants(self) -> list[psutil.Process]:
        try:
            return psutil.Process(self.proc.pid).children(recursive=True)
        except psutil.NoSuchProcess:
            return []

    def finish(self, timeout: float = 120.0) -> tuple[int, str]:
        code = self.proc.wait(timeout=timeout)
        self._t.join(timeout=5)
        return code, self.err_path.read_text()


def _check_log(log: Path, before: pd.DataFrame | None) -> pd.DataFrame:
    """The log reads, trial numbers are unique, and nothing it held before changed."""
    if not log.exists():
        assert before is None or before.empty, "the trial log disappeared"
        return pd.DataFrame(columns=list(SAME))
    df = read_trials(log)
    assert df["trial"].is_unique, f"duplicated trials: {df['trial'].tolist()}"
    json.loads(sidecar_path(log).read_text())  # the sidecar reads too
    if before is not None and not before.empty:
        kept = df.set_index("trial").loc[before["trial"]]
        old = before.set_index("trial")
        for col in ("status", "reduced_chi2", "source", "error"):
            pd.testing.assert_series_equal(kept[col], old[col], check_names=False)
    return df


def _assert_dead(procs: list[psutil.Process], timeout_s: float = 15.0) -> None:
    deadline = time.monotonic() + timeout_s
    for p in procs:
        while True:
            try:
                if not p.is_running() or p.status() == psutil.STATUS_ZOMBIE:
                    break
            except psutil.NoSuchProcess:
                break
            if time.monotonic() > deadline:
                raise AssertionError(f"worker {p.pid} {p.cmdline()[-3:]} outlived its killed parent")
            time.sleep(0.1)


def _summary(lines: list[str]) -> dict:
    return json.loads(next(line for line in reversed(lines) if line.startswith("{")))


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """The uninterrupted run with the same seed."""
    log = tmp_path_factory.mktemp("reference") / "trials.parquet"
    run = _Run(log, "inline", resume=False)
    code, err = run.finish()
    assert code == 0, err
    return read_trials(log), _summary(run.lines)


def test_sigkill_ten_times_then_resume_equals_uninterrupted(reference, tmp_path, tally):
    ref_log, ref_summary = reference
    log = tmp_path / "trials.parquet"
    rng = random.Random(20240611)
    before = None
    kills = mid_write = 0
    resumed_trials: set[int] = set()
    for cycle in range(N_KILLS):
        executor = "pool" if cycle % 4 == 1 else "inline"
        flag = tmp_path / f"writing-{cycle}"
        env = {"PROFSHAPE_TEST_WRITE_FLAG": str(flag)} if cycle % 4 == 3 else None
        run = _Run(log, executor, resume=cycle > 0, env=env)
        assert run.ready.wait(60), "driver did not start"
        if env:  # kill in the middle of a trial-log or sidecar write
            deadline = time.monotonic() + 60
            while not flag.exists() and run.proc.poll() is None and time.monotonic() < deadline:
                time.sleep(0.02)
            time.sleep(0.2)
        else:
            time.sleep(rng.uniform(0.0, 2.0))
        workers = run.descendants()
        if run.proc.poll() is not None:
            pytest.fail(f"the search finished before kill {cycle}; raise BUDGET or SLEEP_S")
        os.kill(run.proc.pid, signal.SIGKILL)
        code, _ = run.finish()
        assert code == -signal.SIGKILL
        kills += 1
        mid_write += bool(env and flag.exists())
        _assert_dead(workers)  # pool workers exit when their parent dies
        side = json.loads(sidecar_path(log).read_text()) if sidecar_path(log).exists() else {}
        resumed_trials |= {p["trial"] for p in side.get("in_flight", [])}
        before = _check_log(log, before)
        # leftover temporary files of a killed write are never read as the log
        assert all(p.name.endswith(".tmp") for p in tmp_path.glob(".trials.parquet.*"))
        tally.add("kills_survived")
    assert kills >= 10 and mid_write >= 2
    run = _Run(log, "inline", resume=True)
    code, err = run.finish()
    assert code == 0, err
    final = _check_log(log, before)
    assert len(final) == BUDGET and list(final["trial"]) == list(range(BUDGET))
    # same trials, same results as the uninterrupted run; only sources of re-run trials differ
    for col in SAME:
        pd.testing.assert_series_equal(final[col], ref_log[col], check_names=False)
    names = [c for c in ref_log.columns if c.startswith("u__")]
    np.testing.assert_array_equal(final[names].to_numpy(), ref_log[names].to_numpy())
    differ = final.loc[final["source"] != ref_log["source"], "trial"]
    assert set(final.loc[final["source"] == "resumed", "trial"]) == set(differ)
    assert set(differ) <= resumed_trials
    assert _summary(run.lines) == ref_summary


def test_sigint_stops_cleanly_and_resumes(reference, tmp_path, tally, no_leftover_processes):
    ref_log, _ = reference
    log = tmp_path / "trials.parquet"
    run = _Run(log, "pool", resume=False)
    assert run.ready.wait(60)
    deadline = time.monotonic() + 60
    while (not log.exists() or len(read_trials(log)) < 3) and time.monotonic() < deadline:
        time.sleep(0.05)
    os.kill(run.proc.pid, signal.SIGINT)
    code, err = run.finish()
    assert code == 130 and "interrupted" in run.lines, (code, err[-2000:])
    assert "Traceback" not in err
    done = _check_log(log, None)
    assert 3 <= len(done) < BUDGET
    # what was done is on disk and is what the uninterrupted run found for those trials
    ref = ref_log.set_index("trial").loc[done["trial"]]
    for col in ("status", "reduced_chi2", "error"):
        pd.testing.assert_series_equal(done.set_index("trial")[col], ref[col], check_names=False)
    tally.add("sigint_survived")
