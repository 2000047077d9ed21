"""Gaussian likelihood and reduced chi-square against scipy references."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from profshape import OperatingPoint
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData, ScalarObservable
from profshape.exceptions import InputDataError
from profshape.forward import Prediction
from profshape.likelihood import LikelihoodSettings, evaluate_misfit

ZG = np.linspace(0.0, 0.06, 121)
ZM = np.array([0.004, 0.012, 0.021, 0.027, 0.033, 0.045])
SIG = np.array([200.0, 250.0, 300.0, 350.0, 300.0, 250.0])


def _model(z):
    return 1000.0 + 16000.0 / (1.0 + np.exp(-(z - 0.025) / 0.004))


def _dataset(sigma_z=None, with_current=False):
    rng = np.random.default_rng(1)
    v = _model(ZM) + rng.normal(0, SIG)
    scal = {"discharge_current": ScalarObservable("discharge_current", 4.3, 0.15)} if with_current else {}
    return DataSet([OperatingPointData(OperatingPoint("p", 300.0, 5e-6),
                                       IonVelocityProfile(ZM, v, SIG, sigma_z), scal)])


def test_log_likelihood_equals_scipy_norm_logpdf():
    # Reference: sum of scipy.stats.norm.logpdf with the measurement sigmas.
    ds = _dataset()
    m = evaluate_misfit(ds, {"p": Prediction("ok", ZG, _model(ZG))})
    meas = ds["p"].ion_velocity
    model_at = np.interp(meas.z_m, ZG, _model(ZG))
    ref = stats.norm.logpdf(meas.velocity_m_s, loc=model_at, scale=meas.sigma_m_s).sum()
    assert m.ok
    assert m.log_likelihood == pytest.approx(ref, rel=1e-12)
    assert m.chi2 == pytest.approx(np.sum(((meas.velocity_m_s - model_at) / meas.sigma_m_s) ** 2))
    assert m.reduced_chi2 == pytest.approx(m.chi2 / 6)
    assert m.n_data == 6


def test_discrepancy_and_scalars_against_scipy():
    ds = _dataset(with_current=True)
    pred = Prediction("ok", ZG, _model(ZG), {"discharge_current": 4.0})
    m = evaluate_misfit(ds, {"p": pred}, LikelihoodSettings(discrepancy_sigma_m_s=150.0))
    meas = ds["p"].ion_velocity
    model_at = np.interp(meas.z_m, ZG, _model(ZG))
    ref = stats.norm.logpdf(meas.velocity_m_s, model_at, np.hypot(meas.sigma_m_s, 150.0)).sum()
    ref += stats.norm.logpdf(4.3, 4.0, 0.15)
    assert m.log_likelihood == pytest.approx(ref, rel=1e-12)
    assert m.per_observable["p/discharge_current"] == pytest.approx((0.3 / 0.15) ** 2)
    assert m.n_data == 7


def test_position_uncertainty_effective_variance():
    # Effective variance sigma_u^2 + (du/dz)^2 sigma_z^2 (Orear 1982); the slope is
    # the model's own, checked here against the analytic derivative of the logistic.
    sz = np.full(ZM.size, 5e-4)
    ds = _dataset(sigma_z=sz)
    m = evaluate_misfit(ds, {"p": Prediction("ok", ZG, _model(ZG))})
    meas = ds["p"].ion_velocity
    e = np.exp(-(meas.z_m - 0.025) / 0.004)
    slope = 16000.0 * e / (0.004 * (1 + e) ** 2)
    model_at = np.interp(meas.z_m, ZG, _model(ZG))
    ref = stats.norm.logpdf(meas.velocity_m_s, model_at, np.sqrt(SIG**2 + slope**2 * sz**2)).sum()
    assert m.log_likelihood == pytest.approx(ref, rel=2e-3)
    off = evaluate_misfit(ds, {"p": Prediction("ok", ZG, _model(ZG))},
                          LikelihoodSettings(use_position_uncertainty=False))
    assert off.chi2 > m.chi2


def test_reduced_chi2_distribution_matches_scipy_chi2():
    # With a correct model and correct sigmas, chi2 follows scipy.stats.chi2(n):
    # compare the empirical tail probability at the 90th percentile.
    rng = np.random.default_rng(7)
    n_sets, exceed = 2000, 0
    threshold = stats.chi2.ppf(0.9, df=ZM.size)
    for _ in range(n_sets):
        v = _model(ZM) + rng.normal(0, SIG)
        ds = DataSet([OperatingPointData(OperatingPoint("p", 300.0, 5e-6),
                                         IonVelocityProfile(ZM, v, SIG))])
        exact = Prediction("ok", ZM, _model(ZM))
        exceed += evaluate_misfit(ds, {"p": exact}).chi2 > threshold
    # binomial 4-sigma band around p = 0.1
    assert abs(exceed / n_sets - 0.1) < 4 * math.sqrt(0.1 * 0.9 / n_sets)


def test_weights():
    ds = _dataset(with_current=True)
    pred = Prediction("ok", ZG, _model(ZG), {"discharge_current": 4.0})
    base = evaluate_misfit(ds, {"p": pred})
    w = evaluate_misfit(ds, {"p": pred}, LikelihoodSettings(weights={"discharge_current": 3.0}))
    assert w.chi2 - base.chi2 == pytest.approx(2 * base.per_observable["p/discharge_current"])
    w2 = evaluate_misfit(ds, {"p": pred}, LikelihoodSettings(weights={"p/ion_velocity": 0.0}))
    assert w2.chi2 == pytest.approx(base.per_observable["p/discharge_current"])


@pytest.mark.parametrize(
    ("pred", "match"),
    [
        (Prediction.failure("timeout", "killed after 60 s"), "timeout: killed after 60 s"),
        (Prediction("ok", ZG, np.full(ZG.size, np.nan)), "non-finite"),
        (Prediction("ok", ZG[:50], _model(ZG[:50])), "covers z"),
        (Prediction("ok", None, None, {"thrust": 0.08}), "no ion-velocity"),
    ],
)
def test_failures_are_not_numbers(pred, match):
    m = evaluate_misfit(_dataset(), {"p": pred})
    assert not m.ok
    assert m.reduced_chi2 == math.inf and m.log_likelihood == -math.inf
    assert pred.status != "ok" or match in ("covers z", "no ion-velocity")
    assert match in m.reason


def test_missing_prediction_and_scalar():
    ds = _dataset(with_current=True)
    assert "no prediction" in evaluate_misfit(ds, {}).reason
    m = evaluate_misfit(ds, {"p": Prediction("ok", ZG, _model(ZG))})
    assert not m.ok and "no 'discharge_current' prediction" in m.reason


def test_settings_validation():
    with pytest.raises(InputDataError, match="discrepancy_sigma_m_s"):
        LikelihoodSettings(discrepancy_sigma_m_s=-1.0)
    with pytest.raises(InputDataError, match="weight for 'thrust'"):
        LikelihoodSettings(weights={"thrust": float("nan")})


# ---------------------------------------------------------------- degrees of freedom n - p
_L_M = 0.05
_ZD = np.linspace(0.004, 0.046, 10)
_SIG_D = 300.0


def _line_profile(c, z):
    c2 = np.atleast_2d(c)
    return 10.0 ** (c2[:, :1] + c2[:, 1:2] * (2.0 * np.asarray(z) / _L_M - 1.0))


def _line_model(profile, point):
    from profshape.forward import Prediction as _P

    z = np.linspace(0.0, _L_M, 51)
    return _P("ok", z, 12000.0 + 2000.0 * np.log10(profile(z)))


def _line_problem(v_obs, sigma=_SIG_D, scalars=None):
    from profshape.forward import CallableModel
    from profshape.problem import CalibrationProblem
    from profshape.shapes import CustomFamily

    fam = CustomFamily(_line_profile, {"a": (-3.0, 1.0), "b": (-2.0, 2.0)}, kind="frequency",
                       vectorized=True)
    ds = DataSet([OperatingPointData(OperatingPoint("p", 300.0, 5e-6),
                                     IonVelocityProfile(_ZD, v_obs, np.full(_ZD.size, sigma)),
                                     scalars or {})])
    return CalibrationProblem(fam, ds, CallableModel(_line_model, grid_m=np.linspace(0, _L_M, 51)))


def _least_squares(v_obs):
    # v = 12000 + 2000 (a + b zeta): ordinary least squares (Bishop 2006, eq. 3.15)
    phi = 2000.0 * np.column_stack([np.ones(_ZD.size), 2.0 * _ZD / _L_M - 1.0])
    return np.linalg.lstsq(phi, v_obs - 12000.0, rcond=None)[0]


def test_problem_sets_n_fitted_and_dof():
    v = 12000.0 + 2000.0 * (-1.0 + 0.4 * (2 * _ZD / _L_M - 1))
    prob = _line_problem(v)
    assert prob.n_fitted == 2
    m = prob.evaluate([-1.0, 0.3])
    assert m.misfit.dof == _ZD.size - 2 and m.misfit.n_fitted == 2
    assert m.misfit.reduced_chi2 == pytest.approx(m.misfit.chi2 / (_ZD.size - 2))
    # an explicit n_fitted in the settings wins over the problem's count
    from profshape.problem import CalibrationProblem

    explicit = CalibrationProblem(prob.family, prob.dataset, prob.forward_model,
                                  LikelihoodSettings(n_fitted=0))
    assert explicit.evaluate([-1.0, 0.3]).misfit.dof == _ZD.size
    # the tail probability is scipy.stats.chi2.sf(chi2, n - p)
    assert m.misfit.tail_probability == pytest.approx(
        stats.chi2.sf(m.misfit.chi2, _ZD.size - 2), rel=1e-12)


def test_best_fit_chi2_follows_chi2_with_n_minus_p_dof():
    # Linear model, correct sigmas: the least-squares chi-square follows chi2(n - p)
    # (Bishop 2006, sec. 3.3 / any regression text); reference distribution scipy.stats.chi2.
    rng = np.random.default_rng(11)
    truth_v = 12000.0 + 2000.0 * (-1.0 + 0.4 * (2 * _ZD / _L_M - 1))
    prob = _line_problem(truth_v)
    chi2_min = []
    for _ in range(300):
        v = truth_v + _SIG_D * rng.standard_normal(_ZD.size)
        p2 = _line_problem(v)
        m = p2.evaluate(_least_squares(v)).misfit
        chi2_min.append(m.chi2)
        assert m.dof == _ZD.size - prob.n_fitted
    chi2_min = np.array(chi2_min)
    assert stats.kstest(chi2_min, stats.chi2(_ZD.size - 2).cdf).pvalue > 1e-3
    # ... and not chi2(n): the degrees of freedom matter
    assert stats.kstest(chi2_min, stats.chi2(_ZD.size).cdf).pvalue < 1e-3


def test_residual_table_sums_to_chi2_and_names_positions():
    ds = _dataset(with_current=True)
    from profshape.likelihood import residual_table

    pred = Prediction("ok", ZG, _model(ZG) + np.where(ZG > 0.03, 2000.0, 0.0),
                      {"discharge_current": 4.0})
    m = evaluate_misfit(ds, {"p": pred})
    table = residual_table(ds, {"p": pred})
    assert table["chi2"].sum() == pytest.approx(m.chi2, rel=1e-12)
    assert len(table) == m.n_data
    worst = table.sort_values("chi2", ascending=False).iloc[0]
    assert worst["observable"] == "ion_velocity" and worst["z_m"] > 0.03
