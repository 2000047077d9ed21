"""A command-line campaign under fire: a second writer, a killed worker, SIGTERM, resume.

One ``profshape calibrate`` runs in its own process (2 pool workers, an external
program that takes 0.3 s a run). While it runs: a second ``calibrate`` and a
``resume`` on the same folder are refused, naming the holder, and ``report`` is
allowed; one busy pool worker is killed with SIGKILL (as the kernel's out-of-memory
killer would) and the campaign goes on; then SIGTERM stops it with the resume hint.
``profshape resume`` then finishes the budget and re-runs the trial whose worker
died, so the final log holds every trial, all successful.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import psutil
import pytest

from profshape.cli import main
from profshape.trials import read_trials
from profshape.workflow.folder_lock import LOCK_FILE, FolderLockedError, lock_output_folder
from reliability.test_bad_input import _lif

HERE = Path(__file__).resolve().parent
PROGRAMS = HERE / "_programs.py"
BUDGET = 24

CAMPAIGN = """\
title = "campaign under fire"

[[operating_points]]
label = "300V"
discharge_voltage_V = 300.0
anode_mass_flow_kg_s = 4.5e-6
propellant = "xenon"
ion_velocity_file = "lif_300.csv"

[[operating_points]]
label = "250V"
discharge_voltage_V = 250.0
anode_mass_flow_kg_s = 4.5e-6
propellant = "xenon"
ion_velocity_file = "lif_250.csv"

[shape]
family = "smooth_step"
options = { channel_length_m = 0.024 }
bounds.transition_z_m = [0.015, 0.038]

[forward_model]
kind = "external"
command = [PYTHON, PROGRAM, "clean", "{input}", "0.3"]
timeout_s = 30
cache = false

[search]
budget = BUDGET
batch_size = 2
seed = 0
num_restarts = 2
raw_samples = 16

[workers]
n_workers = 2

[posterior]
enabled = false

[output]
figures = ["png"]
"""


def _case(folder: Path, text: str = CAMPAIGN) -> Path:
    _lif(300.0).to_csv(folder / "lif_300.csv", index=False)
    _lif(250.0).to_csv(folder / "lif_250.csv", index=False)
    text = (text.replace("PYTHON", json.dumps(sys.executable))
            .replace("PROGRAM", json.dumps(str(PROGRAMS))).replace("BUDGET", str(BUDGET)))
    (folder / "cal.toml").write_text(text)
    return folder / "cal.toml"


def _wait(predicate, timeout_s: float, proc: subprocess.Popen | None = None) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if predicate():
            return True
        if proc is not None and proc.poll() is not None:
            return predicate()
        time.sleep(0.05)
    return False


def _n_logged(log: Path) -> int:
    try:
        return len(read_trials(log))
    except Exception:  # not there yet
        return 0


def _busy_worker(proc: subprocess.Popen) -> psutil.Process | None:
    """A pool worker of ``proc`` that is running a program right now."""
    for child in psutil.Process(proc.pid).children():
        try:
            cmd = " ".join(child.cmdline())
            if "multiprocessing" in cmd and "resource_tracker" not in cmd and child.children():
                return child
        except psutil.NoSuchProcess:
            continue
    return None


def test_campaign_under_fire(tmp_path, capsys, tally):
    cal = _case(tmp_path)
    out = tmp_path / "out"
    log = out / "trials.parquet"
    err_path = tmp_path / "stderr.txt"
    with open(err_path, "w") as err:
        proc = subprocess.Popen([sys.executable, "-m", "profshape.cli", "calibrate", str(cal),
                                 "--out", str(out), "--quiet"],
                                stdout=subprocess.DEVNULL, stderr=err)
    try:
        assert _wait(lambda: _n_logged(log) >= 1 and log.exists(), 120, proc), \
            err_path.read_text()[-2000:]
        # --- a second writer is refused, naming the holder; report is allowed
        for argv in (["calibrate", str(cal), "--out", str(out), "--quiet"],
                     ["resume", str(out), "--quiet"]):
            code = main(argv)
            message = capsys.readouterr().err
            assert code == 2, message
            assert f"in use by another profshape process (pid {proc.pid}" in message, message
            assert "Traceback" not in message
            tally.add("concurrent_writers_refused")
        assert main(["report", str(out)]) == 0
        capsys.readouterr()
        # --- kill a busy pool worker; the campaign replaces its pool and goes on
        busy: list[psutil.Process] = []
        assert _wait(lambda: busy.append(_busy_worker(proc)) or busy[-1] is not None, 60, proc)
        busy[-1].kill()
        assert _wait(lambda: any("worker process died" in e for e in read_trials(log)["error"]),
                     60, proc), err_path.read_text()[-2000:]
        n_then = _n_logged(log)
        assert _wait(lambda: _n_logged(log) >= n_then + 2, 60, proc), "no trial after the kill"
        assert proc.poll() is None, "the campaign ended before SIGTERM; raise BUDGET"
        tally.add("worker_deaths_survived")
        # --- SIGTERM: a clean stop with the resume hint
        os.kill(proc.pid, signal.SIGTERM)
        code = proc.wait(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    err = err_path.read_text()
    assert code == 128 + signal.SIGTERM, err[-3000:]
    assert "terminated (SIGTERM)" in err and f"profshape resume {out}" in err, err[-3000:]
    assert "Traceback" not in err and "leaked" not in err, err[-3000:]
    assert not (out / LOCK_FILE).exists()
    tally.add("sigterm_survived")
    before = read_trials(log)
    assert before["trial"].is_unique and len(before) < BUDGET
    died = set(before.loc[before["error"].str.contains("worker process died"), "trial"])
    assert died
    # --- resume: the budget is finished and the trials whose worker died are run again
    assert main(["resume", str(out), "--quiet"]) == 0, capsys.readouterr().err[-3000:]
    final = read_trials(log)
    assert list(final["trial"]) == list(range(BUDGET))
    assert (final["status"] == "ok").all(), final.loc[final["status"] != "ok", "error"].tolist()
    assert set(final.loc[final["trial"].isin(died), "source"]) == {"resumed"}
    kept = final.set_index("trial").loc[sorted(set(before["trial"]) - died), "reduced_chi2"]
    assert kept.tolist() == before.set_index("trial").loc[kept.index, "reduced_chi2"].tolist()


def test_stale_lock_is_taken_over_and_live_one_refused(tmp_path, tally):
    folder = tmp_path / "out"
    folder.mkdir()
    # a lock file left by a holder that died (no process holds its flock)
    (folder / LOCK_FILE).write_text(json.dumps({"pid": 2**22 + 12345, "host": "elsewhere"}))
    with lock_output_folder(folder) as path:
        info = json.loads(path.read_text())
        assert info["pid"] == os.getpid() and info["took_over_from"]["host"] == "elsewhere"
        with pytest.raises(FolderLockedError, match=f"pid {os.getpid()} on host"):
            with lock_output_folder(folder):
                pass
        tally.add("concurrent_writers_refused")
    assert not (folder / LOCK_FILE).exists()
