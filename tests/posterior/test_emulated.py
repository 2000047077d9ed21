"""The posterior on the output emulator: against botorch, closed forms, budgets and two modes."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import torch
from scipy import stats

from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.exceptions import ConvergenceWarning
from profshape.forward.base import ForwardModel, Prediction
from profshape.operating_point import OperatingPoint
from profshape.posterior import PosteriorSettings, sample_posterior
from profshape.posterior._evaluate import evaluate_many, runs_to_frame
from profshape.posterior.emulated import EmulatorTarget, _ScorePredictor, emulator_training_set
from profshape.problem import CalibrationProblem
from profshape.shapes import CustomFamily

from ._linear import exact_posterior


def test_score_predictor_matches_botorch(linear_case):
    # Reference implementation: botorch's posterior of the emulator's batched score GPs
    # (Rasmussen and Williams 2006, eqs. 2.25-2.26); the numpy transcription must agree.
    problem, trials = linear_case
    x, y = emulator_training_set(problem, trials)
    target = EmulatorTarget(problem, x, y)
    target.fit()
    u = np.random.default_rng(0).random((7, problem.dim))
    fast = _ScorePredictor(target.emulator.score_model_, target.emulator.n_components_)
    mean, var = fast(u)
    with torch.no_grad():
        post = target.emulator.score_model_.posterior(torch.as_tensor(u))
    np.testing.assert_allclose(mean, post.mean.numpy(), rtol=1e-6, atol=1e-8)
    # variances agree to round-off of the prior variance (1 in standardised units, times
    # the score variance): the noise floor of 1e-8 leaves the kernel matrix ill-conditioned
    scale = float(fast.y_std.max() ** 2)
    np.testing.assert_allclose(var, post.variance.numpy(), rtol=1e-3, atol=1e-5 * scale)
    out_mean, out_var = target.outputs(u)
    ref_mean, ref_var = target.emulator.predict(u)
    np.testing.assert_allclose(out_mean, ref_mean, rtol=1e-8, atol=1e-6)
    np.testing.assert_allclose(out_var, ref_var, rtol=1e-3, atol=1e-5 * float(ref_var.max()))


def test_variance_inflated_log_likelihood_is_gaussian_with_added_variance(linear_case):
    # Kennedy and O'Hagan (2001): ln L = sum log N(y | m, s^2 + v); reference scipy.stats.norm.
    problem, trials = linear_case
    x, y = emulator_training_set(problem, trials)
    target = EmulatorTarget(problem, x[:8], y[:8])  # few runs: a visibly unsure emulator
    target.fit()
    u = np.array([[0.3, 0.6], [0.55, 0.45]])
    m, v = target.outputs(u)
    iv = problem.dataset["300V"].ion_velocity
    ref = stats.norm.logpdf(iv.velocity_m_s[None, :], m,
                            np.sqrt(iv.sigma_m_s[None, :] ** 2 + v)).sum(1)
    np.testing.assert_allclose(target.mean(u), ref, rtol=1e-10)
    assert np.all(v > 0)
    # the stated error of a real run's log-likelihood grows where the emulator is unsure
    full = EmulatorTarget(problem, x, y)
    full.fit()
    assert np.all(target.predict(u)[1] > full.predict(u)[1])


def test_emulator_path_matches_closed_form_and_keeps_its_budget(linear_case):
    # Linear-Gaussian problem, flat prior: posterior in closed form (Bishop 2006,
    # section 3.3, eqs. 3.53-3.54). Through the emulator (outputs linear in the
    # coefficients) the sample must match within Monte Carlo error, and the stage must
    # stay within its forward-run budget and say what it spent.
    problem, trials = linear_case
    mean, cov = exact_posterior(problem)
    settings = PosteriorSettings(n_walkers=16, n_steps=1500, burn_in=200, n_refine_draws=6,
                                 n_check_draws=8, forward_budget=20, seed=4)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = sample_posterior(problem, trials, settings)
    d = result.diagnostics
    assert d["target"] == "emulator"
    samples = result.samples.to_numpy()
    sd = np.sqrt(np.diag(cov))
    ess = d["effective_sample_size_total"]
    assert np.all(np.abs(samples.mean(0) - mean) < 5 * sd / np.sqrt(ess))
    ratio = samples.std(0) / sd
    assert np.all((ratio > 0.85) & (ratio < 1.2)), ratio
    assert d["n_forward_runs"] <= 20
    assert sum(d["forward_runs_by_use"].values()) == d["n_forward_runs"]
    assert d["forward_runs_by_use"]["posterior_check"] == 8
    assert result.check.passed
    # one ESS: n_walkers x kept steps / tau (emcee's definition), summed over ensembles
    assert ess == pytest.approx(sum(16 * k for k in d["kept_steps"]) / d["autocorr_time_steps"])


def test_budget_too_small_for_refinement_is_reported(linear_case):
    problem, trials = linear_case
    settings = PosteriorSettings(n_walkers=8, n_steps=300, burn_in=100, n_check_draws=4,
                                 forward_budget=5, seed=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = sample_posterior(problem, trials, settings)
    d = result.diagnostics
    assert d["n_forward_runs"] <= 5
    assert "budget" in d["refine_stop_reason"]
    assert "posterior_refine" not in d["forward_runs_by_use"]


# ------------------------------------------------------------------ two modes
_L = 0.05
_Z = np.linspace(0.004, 0.046, 10)
_SIG = 200.0


def _square_profile(c, z):
    c2 = np.atleast_2d(c)
    return 10.0 ** (c2[:, :1] + c2[:, 1:2] ** 2 * (2.0 * np.asarray(z) / _L - 1.0))


class _Model(ForwardModel):
    name = "square"
    version = "1"

    def grid(self, point):
        return np.linspace(0.0, _L, 41)

    def run(self, profile, point):
        z = np.linspace(0.0, _L, 41)
        return Prediction("ok", z, 12000.0 + 2000.0 * np.log10(profile(z)))


def test_two_symmetric_modes_get_equal_weights():
    # log10 profile = c0 + c1^2 zeta: the likelihood is exactly symmetric in c1, so the
    # posterior has two mirror modes of equal mass (a closed-form symmetry). Ensembles
    # started in distinct basins and pooled by their Laplace weights must give each
    # mode about half the sample; an ensemble started in one basin would give 0 or 1.
    rng = np.random.default_rng(0)
    truth = np.array([-1.0, 0.6])
    v = 12000.0 + 2000.0 * (truth[0] + truth[1] ** 2 * (2 * _Z / _L - 1))
    v = v + _SIG * rng.standard_normal(_Z.size)
    fam = CustomFamily(_square_profile, {"c0": (-2.0, 0.0), "c1": (-1.0, 1.0)},
                       kind="frequency", vectorized=True)
    ds = DataSet([OperatingPointData(OperatingPoint("p", 300.0, 5e-6),
                                     IonVelocityProfile(_Z, v, np.full(_Z.size, _SIG)))])
    problem = CalibrationProblem(fam, ds, _Model())
    design = np.column_stack([rng.uniform(-2, 0, 30), rng.uniform(-1, 1, 30)])
    local = np.vstack([truth + 0.05 * rng.standard_normal((12, 2)) * [1, 1],
                       truth * [1, -1] + 0.05 * rng.standard_normal((12, 2))])
    coeffs = np.clip(np.vstack([design, local]), [-2, -1], [0, 1])
    frame = runs_to_frame(problem, coeffs, evaluate_many(problem, coeffs), "test")
    settings = PosteriorSettings(n_walkers=16, n_steps=1200, burn_in=200, n_check_draws=6,
                                 forward_budget=20, seed=3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = sample_posterior(problem, frame, settings)
    c1 = result.samples["c1"].to_numpy()
    assert result.diagnostics["basins"]["n_basins"] == 2
    frac = float(np.mean(c1 > 0))
    assert 0.3 < frac < 0.7, frac
    # each mode near +-|c1| of the least-squares fit
    assert abs(np.median(c1[c1 > 0]) + np.median(c1[c1 < 0])) < 0.1


def test_check_fails_when_the_emulator_learnt_a_wrong_model(linear_case):
    # The trial log's stored outputs are shifted by 2 sigma (an emulator trained on the
    # wrong model). Without refinement, the real runs of the posterior draws disagree
    # with what the emulator predicts: the predictive check must fail and say so.
    import json

    from profshape.posterior import PosteriorCheckWarning

    problem, trials = linear_case
    bad = trials.copy()

    def shift(text):
        payload = json.loads(text)
        for p in payload.values():
            p["ion_velocity_m_s"] = [v + 800.0 for v in p["ion_velocity_m_s"]]
        return json.dumps(payload)

    bad["predictions"] = bad["predictions"].map(shift)
    settings = PosteriorSettings(n_walkers=8, n_steps=300, burn_in=100, n_refine_rounds=0,
                                 n_check_draws=6, seed=0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        warnings.simplefilter("error", PosteriorCheckWarning)
        with pytest.raises(PosteriorCheckWarning, match=r"sigma from the surrogate"):
            sample_posterior(problem, bad, settings)


def test_emulated_bands_match_closed_form_and_are_stable(linear_case):
    # Bands of the model's ion velocity at the measured positions: for the linear model
    # v = V0 + Phi c with the flat-prior posterior N(m, S), v at z_i is Gaussian with
    # sd sqrt(Phi_i S Phi_i^T) (Bishop 2006, eq. 3.58 without the noise term). The
    # emulated 95 % band must match its width, its quantiles must have settled, and the
    # real check runs must mostly fall inside it.
    from profshape.posterior.bands import emulated_bands

    from ._linear import design_matrix

    problem, trials = linear_case
    _, cov = exact_posterior(problem)
    settings = PosteriorSettings(n_walkers=16, n_steps=1500, burn_in=200, n_check_draws=8,
                                 forward_budget=20, seed=6)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        post = sample_posterior(problem, trials, settings)
    band = emulated_bands(post, (0.95,), seed=1)
    assert band.attrs["stable"] and band.attrs["n_draws"] >= 1000
    iv = problem.dataset["300V"].ion_velocity
    phi = design_matrix(iv.z_m, 1)
    sd = np.sqrt(np.einsum("ij,jk,ik->i", phi, cov, phi))
    width = (band["upper_0.95"] - band["lower_0.95"]).to_numpy()
    ratio = width / (2 * stats.norm.ppf(0.975) * sd)
    assert np.all((ratio > 0.85) & (ratio < 1.2)), ratio
    assert band["n_real"].iloc[0] == 8
    assert band["real_inside_0.95"].mean() >= 0.75
