"""Outcomes that used to mislead: a perfect fit, a flat objective, nothing succeeding,
a posterior that cannot run, labels holding "/".

A perfect fit must be logged and kept (reduced chi-square 0 is a valid value); a flat
objective must be warned about, with no posterior sampled on it; a campaign in which
every trial failed must stop early, print the cause and end non-zero; a posterior
that cannot run must still leave the search's summary and report, and end non-zero.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest

from profshape import OperatingPoint
from profshape.cli import main
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.executors import InlineExecutor
from profshape.forward.callable import CallableModel
from profshape.problem import CalibrationProblem
from profshape.search import SearchSettings, run_search
from profshape.trials import read_trials
from reliability._faulty import GRID_M, TRUTH, FaultyFunction, clean_velocity, make_problem
from reliability.test_campaign import CAMPAIGN, _case


def _exact_problem(labels=("300V", "250V"), offset_m_s=0.0):
    """Data that equal the clean model at TRUTH (plus ``offset_m_s``): misfit 0 there."""
    family = make_problem().family
    model = CallableModel(FaultyFunction(), name="clean", version="1", grid_m=GRID_M)
    points = []
    for lab in labels:
        volts = float(lab.split("/")[-1].rstrip("V"))
        op = OperatingPoint(lab, volts, 4.5e-6)
        v = clean_velocity(family.profile(np.array(TRUTH))(GRID_M), volts)
        zm = np.linspace(0.005, 0.055, 12)
        points.append(OperatingPointData(
            op, IonVelocityProfile(zm, np.interp(zm, GRID_M, v) + offset_m_s, np.full(12, 300.0))))
    return CalibrationProblem(family, DataSet(points), model)


@pytest.mark.parametrize("offset_m_s", [0.0, 1e-9])
def test_perfect_fit_is_logged_and_kept(offset_m_s, tmp_path, tally):
    problem = _exact_problem(offset_m_s=offset_m_s)
    truth = dict(zip(problem.names, TRUTH))
    settings = SearchSettings(budget=6, n_initial=3, seed=0, num_restarts=2, raw_samples=32,
                              progress=False, initial_points=[truth])
    result = run_search(problem, settings, tmp_path / "log.parquet", executor=InlineExecutor())
    log = read_trials(tmp_path / "log.parquet")
    assert len(log) == 6 and (log["status"] == "ok").all(), log["error"].tolist()
    first = log.loc[log["trial"] == 0].iloc[0]
    assert first["source"] == "user"
    # chi2 = sum((offset / 300 m/s)^2) over 24 values: 0 exactly, or ~2.7e-22 (closed form)
    assert first["chi2"] == pytest.approx(24 * (offset_m_s / 300.0) ** 2, abs=1e-20)
    assert result.best_trial == 0 and result.best_reduced_chi2 == first["reduced_chi2"]
    tally.add("zero_misfit_runs")


def test_labels_with_a_slash_name_their_columns(tmp_path):
    problem = _exact_problem(labels=("tank-a/300V", "tank-b/250V"))
    settings = SearchSettings(budget=2, n_initial=2, seed=0, progress=False)
    run_search(problem, settings, tmp_path / "log.parquet", executor=InlineExecutor())
    cols = set(read_trials(tmp_path / "log.parquet").columns)
    assert {"misfit__tank-a/300V__ion_velocity", "misfit__tank-b/250V__ion_velocity"} <= cols


def _calibrate(capsys, cal, out):
    code = main(["calibrate", str(cal), "--out", str(out), "--quiet"])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_flat_objective_is_warned_and_not_sampled(tmp_path, capsys, tally):
    text = (CAMPAIGN.replace('"clean", "{input}", "0.3"', '"flat", "{input}"')
            .replace("enabled = false", "n_walkers = 8\nn_steps = 60\nburn_in = 20\n"
                     "n_check_draws = 2\nn_band_draws = 2"))
    cal = _case(tmp_path, text.replace("n_workers = 2", "n_workers = 1"))
    (tmp_path / "cal.toml").write_text(cal.read_text().replace("budget = 24", "budget = 6"))
    code, _, err = _calibrate(capsys, cal, tmp_path / "out")
    assert code == 0, err
    assert "profshape: warning: flat objective: all 6 successful trials gave the same" in err, err
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["posterior"] is None
    assert any("posterior skipped: flat objective" in n for n in summary["notes"])
    assert not (tmp_path / "out" / "posterior").exists()
    tally.add("flat_objective_runs")


def test_nothing_succeeded_stops_early_and_ends_non_zero(tmp_path, capsys, tally):
    text = (CAMPAIGN.replace('"clean", "{input}", "0.3"', '"fail", "{input}"')
            .replace("n_workers = 2", "n_workers = 1").replace("batch_size = 2", "batch_size = 1")
            .replace("seed = 0", "seed = 0\nstop_after_failures = 4"))
    cal = _case(tmp_path, text)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        code, _, err = _calibrate(capsys, cal, tmp_path / "out")
    assert not [w for w in caught if issubclass(w.category, RuntimeWarning)], caught
    assert code == 1, err
    lines = err.strip().splitlines()
    assert lines[-1].startswith("profshape: error: no trial succeeded (4 trials, stop reason: "
                                "repeated_failure); 4 of 4 failed with: point 300V: failed: "
                                "exited with code 3"), err
    assert "fatal: mesh inverted at cell 12" in lines[-1] and "Traceback" not in err
    out = tmp_path / "out"
    assert len(read_trials(out / "trials.parquet")) == 4  # not the whole budget of 24
    summary = json.loads((out / "summary.json").read_text())
    assert summary["stop_reason"] == "repeated_failure" and summary["best_trial"] is None
    assert "fatal: mesh inverted" in summary["stop_detail"]
    # the report's failed-trial table shows the cause, not only the command
    report = (out / "report.md").read_text()
    table = report.split("## Failed trials")[1]
    assert "fatal: mesh inverted at cell 12" in table
    tally.add("nothing_succeeded_runs")


def test_posterior_that_cannot_run_keeps_the_search_report(tmp_path, capsys):
    """d = 4 needs d + 2 = 6 successful trials; with 5 the posterior cannot run."""
    text = (CAMPAIGN.replace('"0.3"', '"0"').replace("n_workers = 2", "n_workers = 1")
            .replace("enabled = false", "n_walkers = 8\nn_steps = 60\nburn_in = 20"))
    cal = _case(tmp_path, text)
    (tmp_path / "cal.toml").write_text(cal.read_text().replace("budget = 24", "budget = 5"))
    code, _, err = _calibrate(capsys, cal, tmp_path / "out")
    assert code == 1, err
    assert "the posterior could not be computed: only 5 successful trials, at least d + 2 = 6" \
        in err, err
    out = tmp_path / "out"
    summary = json.loads((out / "summary.json").read_text())
    assert summary["n_trials"] == 5 and summary["best_reduced_chi2"] is not None
    assert math.isfinite(summary["best_reduced_chi2"])
    assert (out / "report.md").exists() and "posterior skipped" in (out / "report.md").read_text()
    assert isinstance(pd.read_parquet(out / "trials.parquet"), pd.DataFrame)
