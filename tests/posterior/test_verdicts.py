"""Checks that fail loudly: each one's failing and passing side on small problems."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from profshape.posterior._evaluate import evaluate_many, runs_to_frame
from profshape.posterior.check import judge_check
from profshape.posterior.verdicts import (
    best_fit_residuals,
    best_in_intervals,
    goodness_of_fit,
    map_vs_best,
    run_checks,
    sampler,
)

from ._linear import exact_posterior, make_problem

# ------------------------------------------------------------ goodness of fit


def _best_row(problem):
    mean, _ = exact_posterior(problem)  # least squares = flat-prior MAP (Bishop 2006, 3.3)
    frame = runs_to_frame(problem, mean[None, :], evaluate_many(problem, mean[None, :]), "t")
    return frame.iloc[0]


def test_goodness_of_fit_passes_in_family():
    problem, _ = make_problem(np.array([-1.0, 0.4]), n_z=20, seed=2)
    row = _best_row(problem)
    dof = problem.dataset.n_data - problem.n_fitted
    out = goodness_of_fit(float(row["chi2"]), dof, best_fit_residuals(problem, row))
    assert out.passed
    # tail probability is scipy.stats.chi2.sf with n - p degrees of freedom
    assert out.details["tail_probability"] == pytest.approx(stats.chi2.sf(row["chi2"], dof))
    assert out.details["dof"] == 18


def test_goodness_of_fit_fails_outside_family_and_names_positions():
    # Data from a curved (degree 2) truth, fitted by a straight line (degree 1): the best
    # fit cannot match (chi-square far in the tail), and the check says so and names
    # the positions holding the misfit.
    problem, _ = make_problem(np.array([-1.0, 0.4, 0.6]), degree=1, n_z=20, sigma_m_s=100.0,
                              seed=2)
    row = _best_row(problem)
    res = best_fit_residuals(problem, row)
    assert res["chi2"].sum() == pytest.approx(row["chi2"], rel=1e-9)
    out = goodness_of_fit(float(row["chi2"]), 18, res)
    assert not out.passed
    assert "cannot match the data" in out.message
    top_z = res.sort_values("chi2").iloc[-1]["z_m"]
    assert f"{1e3 * top_z:.3g} mm" in out.message
    assert "300V ion_velocity" in out.message and "shape family" in out.advice


# ------------------------------------------------------------ predictive check


def _table(delta, z=None, n_params=2, ll_best=-10.0):
    n = len(delta)
    ll = ll_best - 0.5 * np.asarray(delta)
    pred = ll if z is None else ll - np.asarray(z) * 0.5
    return pd.DataFrame({"status": ["ok"] * n, "reason": [""] * n,
                         "predicted_log_likelihood": pred, "predicted_std": np.full(n, 0.5),
                         "log_likelihood": ll, "reduced_chi2": np.ones(n)}), ll_best


def _judge(table, ll_best, n_params=2):
    return judge_check(table, best_log_likelihood=ll_best, best_reduced_chi2=1.0,
                       tolerance_nats=1e-6, max_disagree_fraction=0.25,
                       max_failed_fraction=0.25, n_parameters=n_params, warn=False)


def test_predictive_check_passes_for_chi2_consistent_draws():
    # Draws of a linear-Gaussian posterior have 2 (l_best - l) ~ chi2(d) exactly
    # (Bishop 2006 section 3.3); reference distribution scipy.stats.chi2.
    delta = stats.chi2(2).rvs(size=16, random_state=1)
    table, ll_best = _table(delta)
    out = _judge(table, ll_best)
    assert out.passed, out.message
    assert out.delta_chi2_p_value > 1e-3


def test_predictive_check_fails_for_a_collapsed_posterior():
    # A posterior far narrower than the likelihood: 2 (l_best - l) all near 0.
    delta = stats.chi2(2).rvs(size=16, random_state=1) * 1e-3
    table, ll_best = _table(delta)
    out = _judge(table, ll_best)
    assert not out.passed
    assert "narrower" in out.message and "What to do" in out.message


def test_predictive_check_fails_when_runs_disagree_beyond_stated_uncertainty():
    delta = stats.chi2(2).rvs(size=16, random_state=1)
    z = np.zeros(16)
    z[:2] = 8.0  # two draws 8 sigma off: chance ~ 1e-3 at most with calibrated errors
    table, ll_best = _table(delta, z=z)
    out = _judge(table, ll_best)
    assert not out.passed
    assert out.agreement_p_value < 1e-3
    assert "sigma from the surrogate" in out.message


# ------------------------------------------------------------ sampler


def _diag(tau, kept, warnings_=()):
    return {"autocorr_time_steps": tau, "effective_sample_size_total": 32 * kept / tau,
            "autocorr_reliable": kept > 50 * tau, "acceptance_fraction": 0.35, "n_runs": 1,
            "kept_steps": [kept], "warnings": list(warnings_)}


def test_sampler_check_pass_and_fail():
    good = sampler(_diag(20.0, 1500))
    assert good.passed and "effective sample size 2400" in good.message
    bad = sampler(_diag(80.0, 1500, ["the kept chain (1500 steps) is shorter than 50 "
                                     "autocorrelation times"]))
    assert not bad.passed and "raise PosteriorSettings.n_steps" in bad.advice


# ------------------------------------------------------------ intervals, MAP


def _samples(seed=0):
    rng = np.random.default_rng(seed)
    return pd.DataFrame({"a": 0.5 + 0.01 * rng.standard_normal(4000),
                         "b": 0.2 + 0.02 * rng.standard_normal(4000)})


def test_best_in_intervals_pass_and_fail_with_bound():
    s = _samples()
    bounds = np.array([[0.0, 1.0], [0.0, 1.0]])
    ok = best_in_intervals({"best trial": {"a": 0.505, "b": 0.21}}, s, bounds)
    assert ok.passed
    bad = best_in_intervals({"best trial": {"a": 0.505, "b": 0.0}}, s, bounds)
    assert not bad.passed
    assert "b = 0 outside" in bad.message
    assert "lower bound" in bad.advice


def test_map_vs_best_agree_fail_and_explained():
    s = _samples()
    agree = map_vs_best({"a": 0.5, "b": 0.2}, -10.0, "emulator_optimum",
                        {"a": 0.503, "b": 0.205}, -10.2, s)
    assert agree.passed and "agree" in agree.message
    # the MAP far better than the best trial: the search had not converged
    worse = map_vs_best({"a": 0.5, "b": 0.2}, -10.0, "emulator_optimum",
                        {"a": 0.6, "b": 0.2}, -30.0, s)
    assert not worse.passed and "had not converged" in worse.message
    # equally good but far apart: a ridge, explained (passes)
    ridge = map_vs_best({"a": 0.5, "b": 0.2}, -10.0, "emulator_optimum",
                        {"a": 0.6, "b": 0.2}, -10.1, s)
    assert ridge.passed and "flat or ridged" in ridge.message


def test_run_checks_on_a_trial_log(linear_case, linear_posterior):
    problem, trials = linear_case
    checks = {c.name: c for c in run_checks(problem, trials, linear_posterior)}
    assert set(checks) == {"goodness_of_fit", "predictive", "sampler", "best_in_intervals",
                           "map_vs_best"}  # exact method: no refinement check
    assert checks["goodness_of_fit"].passed
    assert checks["best_in_intervals"].passed, checks["best_in_intervals"].message
    assert all(c.line().startswith(f"check {c.name}: ") for c in checks.values())


def test_refinement_check_pass_and_fail():
    from profshape.posterior.verdicts import refinement

    ok = refinement({"refinement": [{"stated_error_90_nats": 0.4}], "target": "emulator",
                     "refine_stop_reason": "stated error of the log-likelihood at posterior "
                     "draws 0.4 nats <= 1 and the last forward runs agreed"}, 1.0)
    assert ok.passed
    bad = refinement({"refinement": [{"stated_error_90_nats": 6.0}], "target": "emulator",
                      "refine_stop_reason": "posterior forward budget used up (stated error "
                      "6 nats, threshold 1)"}, 1.0)
    assert not bad.passed and "forward_budget" in bad.advice


def test_report_shows_the_same_ess_and_tau_as_the_summary_and_the_checks(linear_case,
                                                                        linear_posterior):
    # One effective sample size and one autocorrelation time: the report prints the
    # numbers the summary holds; failing checks open the report, loudly.
    from profshape.workflow.report import _report_markdown

    problem, trials = linear_case
    d = linear_posterior.diagnostics
    checks = [c.to_dict() for c in run_checks(problem, trials, linear_posterior)]
    checks.append({"name": "demo_fail", "passed": False, "message": "x", "advice": "y"})
    summary = {"title": "t", "family": problem.family.name, "parameters": list(problem.names),
               "n_trials": len(trials), "n_failed": 0, "stop_reason": "budget",
               "best_reduced_chi2": 1.0, "best_trial": 0, "profshape_version": "0",
               "best_coefficients": {}, "figures": [], "notes": [], "checks": checks,
               "posterior": {"effective_sample_size": d["effective_sample_size_total"],
                             "autocorr_time_steps": d["autocorr_time_steps"]}}
    text = _report_markdown(summary, linear_posterior, None, None, trials)
    assert f"effective sample size: {d['effective_sample_size_total']:.4g}" in text
    assert f"integrated autocorrelation time: {d['autocorr_time_steps']:.4g} steps" in text
    assert "checks FAILED" in text and text.index("## Checks") < text.index("## Best fit")
