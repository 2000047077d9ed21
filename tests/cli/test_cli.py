"""End to end: the `profshape` command on the demo, an external model, resume and report."""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from profshape.cli import main
from profshape.trials import read_trials

EXAMPLE_CODE = Path(__file__).resolve().parents[1] / "forward" / "example_code.py"


def _run(*args: str, timeout: float = 600, **kw) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "profshape.cli", *args], capture_output=True,
                          text=True, timeout=timeout, **kw)


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


# ----------------------------------------------------------------------- demo
@pytest.fixture(scope="module")
def demo_folder(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo") / "run"
    proc = _run("demo", "--budget", "8", "--workers", "2", "--seed", "3", "--out", str(out), "--quiet")
    assert proc.returncode == 0, proc.stderr[-3000:]
    assert "best reduced chi-square" in proc.stdout
    return out


def test_demo_outputs(demo_folder):
    trials = pd.read_parquet(demo_folder / "trials.parquet")
    assert len(trials) == 8
    assert sorted(trials["trial"]) == list(range(8))
    summary = json.loads((demo_folder / "summary.json").read_text())
    assert summary["n_trials"] == 8
    assert summary["n_failed"] == int((trials["status"] != "ok").sum())
    ok = trials[trials["status"] == "ok"]
    assert summary["best_reduced_chi2"] == pytest.approx(ok["reduced_chi2"].min(), rel=1e-12)
    assert set(summary["best_coefficients"]) == {
        "log10_inner_level", "log10_outer_level", "transition_z_m", "transition_width_m"}
    assert summary["stop_reason"] in ("budget", "target", "patience")
    for rel in summary["figures"]:
        assert (demo_folder / rel).stat().st_size > 1000, rel
    assert {Path(f).stem for f in summary["figures"]} >= {"fit", "search_trace", "pairs", "shape_gallery"}
    report = (demo_folder / "report.md").read_text()
    assert "Best reduced chi-square" in report and "qualification testing" in report
    if summary["posterior"] is not None:  # the posterior needs >= 5 successful trials
        assert (demo_folder / summary["bands_files"]["ion_velocity"]).exists()
        pred = pd.read_csv(demo_folder / "predictions.csv")
        assert {"discharge_current", "thrust"} <= set(pred["name"])
        assert "350V" in set(pred["label"])
        assert bool(pred.loc[pred["label"] == "350V", "extrapolation"].all())


def test_report_rebuilds_without_running(demo_folder):
    trials_digest = _digest(demo_folder / "trials.parquet")
    for rel in json.loads((demo_folder / "summary.json").read_text())["figures"]:
        (demo_folder / rel).unlink()
    (demo_folder / "report.md").unlink()
    cache_before = sorted(p.name for p in (demo_folder / "cache").iterdir())
    proc = _run("report", str(demo_folder))
    assert proc.returncode == 0, proc.stderr[-3000:]
    assert (demo_folder / "report.md").exists()
    summary = json.loads((demo_folder / "summary.json").read_text())
    assert all((demo_folder / rel).exists() for rel in summary["figures"])
    assert _digest(demo_folder / "trials.parquet") == trials_digest
    # no forward run: the result cache gained nothing
    assert sorted(p.name for p in (demo_folder / "cache").iterdir()) == cache_before


def test_demo_refuses_to_overwrite(demo_folder):
    digest = _digest(demo_folder / "trials.parquet")
    assert main(["demo", "--budget", "8", "--out", str(demo_folder), "--quiet"]) == 2
    assert _digest(demo_folder / "trials.parquet") == digest


# ------------------------------------------------------ external forward model
def _truth_velocity(z: np.ndarray, voltage: float) -> np.ndarray:
    sys.path.insert(0, str(EXAMPLE_CODE.parent))
    try:
        import example_code
    finally:
        sys.path.pop(0)
    prof = 10 ** (-2.3 + 1.2 * 0.5 * (1 + np.tanh((z - 0.026) / 0.003)))
    return np.array(example_code.ion_velocity(list(z), list(prof), voltage))


@pytest.fixture
def external_case(tmp_path) -> Path:
    z = np.linspace(0.004, 0.055, 12)
    rows = []
    for label, volts in (("a", 300.0), ("b", 260.0)):
        v = _truth_velocity(z, volts)
        rows.append(pd.DataFrame({"z_m": z, "ion_velocity_m_s": np.round(v), "sigma_ion_velocity_m_s": 300.0}))
        rows[-1].to_csv(tmp_path / f"lif_{label}.csv", index=False)
    (tmp_path / "cal.toml").write_text(textwrap.dedent(f"""
        title = "external model test"

        [[operating_points]]
        label = "a"
        discharge_voltage_V = 300.0
        anode_mass_flow_kg_s = 5e-6
        ion_velocity_file = "lif_a.csv"

        [[operating_points]]
        label = "b"
        discharge_voltage_V = 260.0
        anode_mass_flow_kg_s = 5e-6
        ion_velocity_file = "lif_b.csv"

        [shape]
        family = "smooth_step"

        [forward_model]
        kind = "external"
        command = [{json.dumps(sys.executable)}, {json.dumps(str(EXAMPLE_CODE))}, "{{input}}"]
        timeout_s = 30
        retries = 0

        [search]
        budget = 14
        seed = 1
        num_restarts = 2
        raw_samples = 64

        [posterior]
        n_walkers = 16
        n_steps = 300
        burn_in = 100
        n_gp_draws = 2
        n_refine_rounds = 0
        n_check_draws = 4
        n_band_draws = 4
    """))
    return tmp_path


def test_calibrate_with_external_model(external_case):
    out = external_case / "out"
    proc = _run("calibrate", str(external_case / "cal.toml"), "--out", str(out), "--quiet")
    assert proc.returncode == 0, proc.stderr[-3000:]
    trials = pd.read_parquet(out / "trials.parquet")
    assert len(trials) == 14 and (trials["status"] == "ok").all()
    summary = json.loads((out / "summary.json").read_text())
    assert summary["best_reduced_chi2"] == pytest.approx(trials["reduced_chi2"].min())
    # each trial ran in its own work folder inside the calibration folder
    work = out / "work"
    assert work.is_dir() and all(p.resolve().is_relative_to(out.resolve()) for p in work.rglob("*"))
    assert (out / "report.md").exists()


def test_resume_after_kill(external_case):
    out = external_case / "out"
    cmd = [sys.executable, "-m", "profshape.cli", "calibrate", str(external_case / "cal.toml"),
           "--out", str(out), "--quiet"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    log = out / "trials.parquet"
    deadline = time.time() + 240
    try:
        while time.time() < deadline:
            if log.exists():
                try:
                    if len(read_trials(log)) >= 4:  # table and journal
                        break
                except Exception:  # mid-replace: read again
                    pass
            if proc.poll() is not None:
                break
            time.sleep(0.05)
    finally:
        if proc.poll() is None:
            os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
    before = read_trials(log)
    assert 0 < len(before) <= 14
    done = before[["trial", "reduced_chi2"]].set_index("trial")
    res = _run("resume", str(out), "--quiet")
    assert res.returncode == 0, res.stderr[-3000:]
    after = pd.read_parquet(log)
    assert sorted(after["trial"]) == list(range(14))
    # no completed trial lost or changed
    kept = after.set_index("trial").loc[done.index, "reduced_chi2"]
    np.testing.assert_allclose(kept.to_numpy(), done["reduced_chi2"].to_numpy())
    summary = json.loads((out / "summary.json").read_text())
    assert summary["n_trials"] == 14


# ------------------------------------------------------------------ bad input
def test_help_for_every_command(capsys):
    for command in ("demo", "calibrate", "resume", "report", "solve"):
        with pytest.raises(SystemExit) as info:
            main([command, "--help"])
        assert info.value.code == 0
        assert "usage: profshape " + command in capsys.readouterr().out


def test_bad_input_exit_codes(tmp_path, capsys):
    assert main(["calibrate", str(tmp_path / "missing.toml")]) == 2
    assert "calibration file not found" in capsys.readouterr().err
    bad = tmp_path / "bad.toml"
    bad.write_text('[shape]\nfamily = "smooth_step"\nsmoothness = 3\n')
    assert main(["calibrate", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "shape.smoothness" in err and "line 3" in err and "Traceback" not in err
    assert main(["report", str(tmp_path)]) == 2
    assert "no trials.parquet" in capsys.readouterr().err
    assert main(["resume", str(tmp_path)]) == 2
    assert "not a calibration folder" in capsys.readouterr().err
    assert main(["demo", "--budget", "0"]) == 2
    assert main([]) == 2
