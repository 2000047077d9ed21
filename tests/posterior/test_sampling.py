"""Posterior sampling against closed forms and reference implementations."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import torch

from profshape.exceptions import ConvergenceWarning, InputDataError
from profshape.posterior import (
    PosteriorCheckWarning,
    PosteriorResult,
    PosteriorSettings,
    sample_posterior,
)
from profshape.posterior.sampler import run_ensemble
from profshape.posterior.surrogate import _matern52, fit_log_likelihood_surrogate

from ._linear import exact_posterior


def _within_mc_error(samples: np.ndarray, mean: np.ndarray, cov: np.ndarray, ess: float,
                     mean_tol: float = 5.0, cov_rtol: float | None = None) -> None:
    """Sample mean within ``mean_tol`` Monte Carlo standard errors, covariance within rtol."""
    sd = np.sqrt(np.diag(cov))
    err_mean = (samples.mean(0) - mean) / (sd / np.sqrt(ess))
    assert np.all(np.abs(err_mean) < mean_tol), err_mean
    # Relative standard error of a variance estimate from ess independent draws:
    # sqrt(2 / ess) (Gaussian sampling theory, e.g. scipy.stats.chi2 variance 2 nu).
    rtol = cov_rtol if cov_rtol is not None else 5.0 * np.sqrt(2.0 / ess)
    np.testing.assert_allclose(np.cov(samples.T), cov, rtol=rtol, atol=rtol * sd.max() ** 2 / 3)


def test_sampler_layer_gaussian_exact_density():
    # Known Gaussian target in the unit cube (Bishop 2006 section 3.3 posterior form);
    # emcee's draws must reproduce mean and covariance within Monte Carlo error.
    mean = np.array([0.45, 0.6])
    cov = np.array([[0.004, 0.0015], [0.0015, 0.002]])
    prec = np.linalg.inv(cov)

    def log_prob(u):
        r = u - mean
        return -0.5 * np.einsum("ij,jk,ik->i", r, prec, r)

    rng = np.random.default_rng(0)
    run = run_ensemble(log_prob, mean + 0.01 * rng.standard_normal((16, 2)), n_steps=1500,
                       burn_in=300, seed=0)
    ess = min(run.diagnostics["effective_sample_size"])
    assert ess > 300
    assert 0.2 < run.diagnostics["acceptance_fraction"] < 0.9
    _within_mc_error(run.samples, mean, cov, ess)


def test_surrogate_matches_botorch_posterior_and_pathwise_moments():
    # Reference implementation: botorch's SingleTaskGP.posterior (Rasmussen and Williams
    # 2006, eq. 2.25-2.26). The numpy mean/std used by the sampler must agree with it,
    # and the pathwise realisations must have that mean and variance on average.
    rng = np.random.default_rng(2)
    u = rng.random((50, 2))
    ll = -30.0 * ((u - 0.4) ** 2).sum(1)
    sur = fit_log_likelihood_surrogate(u, ll)
    test_u = rng.random((6, 2))
    mean, std = sur.predict(test_u)
    with torch.no_grad():
        post = sur.model.posterior(torch.as_tensor(test_u))
        ref_mean = sur.y_mean + sur.y_std * post.mean.numpy().ravel()
        ref_std = sur.y_std * post.variance.sqrt().numpy().ravel()
    np.testing.assert_allclose(mean, ref_mean, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(std, ref_std, rtol=1e-4, atol=1e-6)
    # Matern 5/2 kernel against gpytorch's implementation.
    k_ref = sur.model.covar_module.base_kernel(torch.as_tensor(test_u),
                                               torch.as_tensor(u)).to_dense().detach().numpy()
    np.testing.assert_allclose(_matern52(test_u, u, sur.lengthscale), k_ref, rtol=1e-6, atol=1e-9)
    paths = sur.draw_realisations(400, n_features=1024, seed=0)
    values = np.array([p(test_u) for p in paths])
    # Monte Carlo over 400 paths: mean error ~ std/20; RFF prior adds a few percent.
    np.testing.assert_allclose(values.mean(0), ref_mean, atol=float(4 * ref_std.max() / 20 + 1e-3))
    np.testing.assert_allclose(values.std(0), ref_std, rtol=0.25, atol=1e-3)


def test_exact_likelihood_path_matches_closed_form(linear_case):
    # Linear-Gaussian problem, flat prior: posterior mean and covariance in closed form
    # (Bishop 2006, Pattern Recognition and Machine Learning, section 3.3, eqs. 3.53-3.54).
    problem, trials = linear_case
    mean, cov = exact_posterior(problem)
    settings = PosteriorSettings(method="exact", n_walkers=16, n_steps=700, burn_in=200,
                                 n_check_draws=4, seed=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = sample_posterior(problem, trials, settings)
    ess = result.diagnostics["min_effective_sample_size"]
    assert ess > 150
    _within_mc_error(result.samples.to_numpy(), mean, cov, ess)
    np.testing.assert_allclose(result.map_vector, mean, atol=0.3 * np.sqrt(np.diag(cov)).max())
    assert result.check is not None and result.check.passed


def test_surrogate_path_matches_closed_form(linear_case):
    # Same closed form (Bishop 2006 section 3.3) through the GP surrogate: botorch GP on
    # 72 trials, 4 GP realisations, one refinement round. Tolerance: Monte Carlo error plus
    # a 15 % allowance for the surrogate (its uncertainty is meant to widen the posterior).
    problem, trials = linear_case
    mean, cov = exact_posterior(problem)
    settings = PosteriorSettings(n_walkers=16, n_steps=600, burn_in=200, n_gp_draws=4,
                                 n_refine_draws=8, n_check_draws=8, seed=2,
                                 surrogate_of="log_likelihood")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = sample_posterior(problem, trials, settings)
    ess = result.diagnostics["min_effective_sample_size"]
    _within_mc_error(result.samples.to_numpy(), mean, cov, ess, cov_rtol=0.2)
    sd = np.sqrt(np.diag(cov))
    assert np.all(np.abs(result.map_vector - mean) < 0.3 * sd)
    assert result.map_source in ("surrogate_optimum", "best_trial")
    # The check ran the real model and agrees with the surrogate.
    assert result.check.n_ok == 8 and result.check.passed
    # The first refinement round already agrees with the surrogate and its stated error
    # at posterior draws is below 1 nat, so refinement stops there: 8 refinement + 1 MAP
    # + 8 check runs, all logged in the trial layout and counted against the budget.
    refinement = result.diagnostics["refinement"]
    assert [r.get("n_runs", 0) for r in refinement] == [8, 0]
    assert refinement[0]["disagree_fraction"] == 0.0
    assert "stated error" in result.diagnostics["refine_stop_reason"]
    assert result.diagnostics["n_forward_runs"] == 17
    assert result.diagnostics["forward_runs_by_use"] == {
        "posterior_refine": 8, "posterior_map": 1, "posterior_check": 8}
    assert set(result.forward_runs["source"]) == {"posterior_refine_1", "posterior_map",
                                                  "posterior_check"}
    for key in ("acceptance_fraction", "autocorr_time", "effective_sample_size"):
        assert key in result.diagnostics


def test_check_warns_when_surrogate_disagrees(linear_case):
    # A trial log whose log-likelihoods were shifted by a constant is a surrogate that
    # disagrees with the real model everywhere: the predictive check must warn.
    problem, trials = linear_case
    bad = trials.copy()
    bad["log_likelihood"] = bad["log_likelihood"] + 50.0
    settings = PosteriorSettings(n_walkers=8, n_steps=200, burn_in=50, n_gp_draws=0,
                                 n_refine_rounds=0, n_check_draws=6,
                                 surrogate_of="log_likelihood")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        warnings.simplefilter("error", PosteriorCheckWarning)
        with pytest.raises(PosteriorCheckWarning, match=r"sigma from the surrogate"):
            sample_posterior(problem, bad, settings)


def test_save_load_roundtrip(linear_case, tmp_path):
    problem, trials = linear_case
    settings = PosteriorSettings(n_walkers=8, n_steps=150, burn_in=50, n_gp_draws=2,
                                 n_refine_rounds=0, n_check_draws=3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = sample_posterior(problem, trials, settings)
    result.save(tmp_path / "post")
    back = PosteriorResult.load(tmp_path / "post")
    assert back.names == result.names
    np.testing.assert_allclose(back.samples.to_numpy(), result.samples.to_numpy())
    np.testing.assert_allclose(back.unit_samples, result.unit_samples)
    assert back.map_coefficients == result.map_coefficients
    assert back.check.n_draws == 3
    summary = back.summary()
    assert list(summary["name"]) == list(problem.names)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"n_walkers": 7}, "n_walkers must be even"),
        ({"burn_in": 100, "n_steps": 100}, "burn_in must be smaller"),
        ({"method": "slice"}, "method must be"),
        ({"band_levels": (0.5, 1.2)}, "strictly between 0 and 1"),
        ({"thin": 0}, "thin must be >= 1"),
        ({"check_max_failed_fraction": 2.0}, r"must lie in \[0, 1\]"),
    ],
)
def test_settings_validation(kwargs, match):
    with pytest.raises(InputDataError, match=match):
        PosteriorSettings(**kwargs)


def test_bad_trials_are_refused(linear_case):
    problem, trials = linear_case
    with pytest.raises(InputDataError, match="missing column"):
        sample_posterior(problem, trials.drop(columns=["log_likelihood"]))
    with pytest.raises(InputDataError, match="at least d \\+ 2"):
        sample_posterior(problem, trials.head(3))
    with pytest.raises(InputDataError, match="too few for 2 parameters"):
        sample_posterior(problem, trials, PosteriorSettings(n_walkers=2))


def test_surrogate_path_narrow_four_coefficient_posterior():
    # A narrow 4-coefficient linear-Gaussian posterior (widths 0.4-2 % of the bounds) with
    # trial log-likelihoods spanning 10^4 nats. The closed form (Bishop 2006, section 3.3)
    # must be recovered: mean within 0.5 sd, widths within [0.8, 1.6] of the exact ones
    # (the upper allowance is the surrogate's own uncertainty). A clipping floor of 40 nats
    # fails this (the clipped plateau takes mass; widths up to 2.5x were measured).
    from ._linear import make_problem, make_trials

    problem, _ = make_problem(np.array([-1.0, 0.4, 0.2, -0.1]), n_z=40, sigma_m_s=100.0,
                              seed=5)
    mean, cov = exact_posterior(problem)
    sd = np.sqrt(np.diag(cov))
    trials = make_trials(problem, n_design=40, n_local=40, seed=3, spread=4.0)
    settings = PosteriorSettings(n_walkers=16, n_steps=500, burn_in=150, n_gp_draws=4,
                                 n_refine_draws=8, n_check_draws=8)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = sample_posterior(problem, trials, settings)
    samples = result.samples.to_numpy()
    assert np.all(np.abs(samples.mean(0) - mean) < 0.5 * sd)
    ratio = samples.std(0) / sd
    assert np.all((ratio > 0.8) & (ratio < 1.6)), ratio
    assert result.check.passed
