"""Output emulator (reduced basis + score GPs) and the vectorised misfit of output vectors."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from botorch.acquisition.logei import qLogExpectedImprovement
from botorch.acquisition.objective import GenericMCObjective
from botorch.sampling import SobolQMCNormalSampler
from sklearn.decomposition import PCA

from profshape import OperatingPoint
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData, ScalarObservable
from profshape.emulator import EmulatorModel, OutputEmulator
from profshape.exceptions import InputDataError
from profshape.forward.base import Prediction
from profshape.likelihood import LikelihoodSettings, evaluate_misfit
from profshape.output_layout import OutputLayout

Z = np.linspace(0.0, 1.0, 25)


def _outputs(x):
    """Profiles of rank 3 in z: a shifted sine with an amplitude, plus a quadratic."""
    x = np.atleast_2d(x)
    return (np.sin(3 * x[:, :1] + 2 * Z[None]) * (1 + x[:, 1:2]) + x[:, 2:3] * Z[None] ** 2)


def _fitted(n=30, seed=0, **kw):
    rng = np.random.default_rng(seed)
    x = rng.random((n, 3))
    return OutputEmulator(**kw).fit(x, _outputs(x)), rng


def test_basis_and_residual_follow_the_svd_like_sklearn_pca():
    rng = np.random.default_rng(3)
    x = rng.random((40, 3))
    y = _outputs(x) + 0.01 * rng.normal(size=(40, Z.size))
    em = OutputEmulator(variance_fraction=0.99).fit(x, y, scale=np.ones(Z.size))
    # scikit-learn's PCA as the reference (same centring, no scaling with scale = 1)
    pca = PCA().fit(y)
    cum = np.cumsum(pca.explained_variance_ratio_)
    k = int(np.searchsorted(cum, 0.99) + 1)
    assert em.n_components_ == k
    assert em.explained_fraction_ == pytest.approx(cum[k - 1], rel=1e-9)
    np.testing.assert_allclose(np.abs(em.basis_), np.abs(pca.components_[:k]), atol=1e-8)
    # discarded variance per column (Eckart-Young: the rank-k truncation's residual)
    recon = pca.inverse_transform(np.c_[pca.transform(y)[:, :k], np.zeros((40, Z.size - k))])
    np.testing.assert_allclose(em.residual_variance_, ((y - recon) ** 2).mean(axis=0),
                               rtol=1e-8, atol=1e-14)


def test_predictions_are_accurate_and_their_variance_is_honest():
    em, rng = _fitted(n=40)
    xt = rng.random((30, 3))
    mean, var = em.predict(xt)
    truth = _outputs(xt)
    assert mean.shape == var.shape == (30, Z.size)
    assert np.all(var > 0)
    err = np.abs(mean - truth)
    assert err.max() < 0.1 * np.ptp(truth)
    # z-scores of a calibrated predictive distribution: almost all within 4 sigma
    # (common practice, no source)
    assert np.mean(err / np.sqrt(var) < 4.0) > 0.95


def test_samples_match_mean_and_variance_and_posterior_feeds_mc_acquisition():
    em, rng = _fitted()
    xt = rng.random((4, 3))
    mean, var = em.predict(xt)
    s = em.sample(xt, 4000, seed=1)
    assert s.shape == (4000, 4, Z.size)
    # Monte-Carlo standard errors: 4000 draws, mean within 5 se, variance within 15 %
    np.testing.assert_array_less(np.abs(s.mean(0) - mean), 5 * np.sqrt(var / 4000) + 1e-12)
    np.testing.assert_allclose(s.var(0), var, rtol=0.15)
    # botorch MC acquisition on a composite objective (Astudillo and Frazier 2019)
    target = _outputs(np.array([0.3, 0.6, 0.2]))[0]
    model = em.model()
    assert isinstance(model, EmulatorModel) and model.num_outputs == Z.size
    obj = GenericMCObjective(lambda y, X=None: -((y - torch.as_tensor(target)) ** 2).sum(-1))
    best = float(-((_outputs(em.train_X_) - target) ** 2).sum(-1).min())
    acq = qLogExpectedImprovement(model, best_f=best, objective=obj,
                                  sampler=SobolQMCNormalSampler(torch.Size([64]), seed=0))
    X = torch.tensor(rng.random((5, 1, 3)), requires_grad=True)
    val = acq(X)
    val.sum().backward()
    assert val.shape == (5,) and torch.all(torch.isfinite(X.grad))


def test_fit_refuses_bad_input_and_constant_outputs_need_no_gp():
    with pytest.raises(InputDataError, match="same n"):
        OutputEmulator().fit(np.zeros((3, 2)), np.zeros((4, 5)))
    with pytest.raises(InputDataError, match="finite"):
        OutputEmulator().fit(np.zeros((3, 2)), np.full((3, 5), np.nan))
    with pytest.raises(InputDataError, match="variance_fraction"):
        OutputEmulator(variance_fraction=1.5)
    em = OutputEmulator().fit(np.random.default_rng(0).random((5, 2)), np.ones((5, 4)))
    assert em.n_components_ == 0 and em.score_model_ is None
    mean, var = em.predict(np.full((2, 2), 0.5))
    np.testing.assert_allclose(mean, 1.0)
    np.testing.assert_allclose(var, 0.0)


def _dataset():
    rng = np.random.default_rng(0)
    pts = []
    for lab, volt in (("a", 300.0), ("b", 250.0)):
        z = np.linspace(0.01, 0.05, 7)
        prof = IonVelocityProfile(z, 1.5e4 * z / 0.05 + rng.normal(0, 200, z.size),
                                  np.full(z.size, 250.0), np.full(z.size, 3e-4))
        sc = {"discharge_current": ScalarObservable("discharge_current", 5.0, 0.1, "A")} if lab == "a" else {}
        pts.append(OperatingPointData(OperatingPoint(lab, volt, 4.5e-6), prof, sc))
    return DataSet(pts)


def _prediction(shift):
    zg = np.linspace(0.0, 0.06, 61)
    u = 1.6e4 / (1 + np.exp(-(zg - 0.025 - shift) / 0.006))
    return Prediction("ok", zg, u, {"discharge_current": 5.2 + shift * 10, "thrust": 0.08})


@pytest.mark.parametrize("settings", [
    LikelihoodSettings(),
    LikelihoodSettings(discrepancy_sigma_m_s=120.0, scalar_discrepancy_relative=0.02,
                       weights={"b/ion_velocity": 0.5, "discharge_current": 2.0}),
    LikelihoodSettings(use_position_uncertainty=False, n_fitted=3),
])
def test_layout_misfit_equals_evaluate_misfit(settings):
    data = _dataset()
    layout = OutputLayout(data, settings)
    preds = {"a": _prediction(0.001), "b": _prediction(-0.002)}
    y = layout.vector(preds)
    n_slopes = 14 if settings.use_position_uncertainty else 0
    assert layout.n_values == data.n_data == 15 and y.shape == (15 + n_slopes,)
    # the reference: profshape.likelihood.evaluate_misfit on the same predictions
    ref = evaluate_misfit(data, preds, settings)
    assert float(layout.chi2(y)) == pytest.approx(ref.chi2, rel=1e-12)
    assert float(layout.log_likelihood(y)) == pytest.approx(ref.log_likelihood, rel=1e-12)
    assert float(layout.chi2(y)) / layout.dof() == pytest.approx(ref.reduced_chi2, rel=1e-12)
    # torch and batched forms agree with numpy
    yt = torch.as_tensor(np.stack([y, y]))
    np.testing.assert_allclose(layout.chi2(yt).numpy(), ref.chi2, rtol=1e-12)
    # an override of the discrepancy, as for a fitted one
    ref2 = evaluate_misfit(data, preds, settings, discrepancy_sigma_m_s=400.0)
    assert float(layout.chi2(y, discrepancy_sigma_m_s=400.0)) == pytest.approx(ref2.chi2, rel=1e-12)
    # extra (emulator) variance lowers the chi-square
    assert float(layout.chi2(y, extra_variance=np.full(15, 1e4))) < ref.chi2


def test_layout_refuses_failed_or_short_predictions():
    layout = OutputLayout(_dataset())
    with pytest.raises(InputDataError, match="point b"):
        layout.vector({"a": _prediction(0.0), "b": Prediction.failure("failed", "boom")})
    short = Prediction("ok", np.linspace(0.0, 0.03, 5), np.ones(5), {"discharge_current": 1.0})
    with pytest.raises(InputDataError, match="cover"):
        layout.vector({"a": short, "b": _prediction(0.0)})


def test_one_component_posterior_has_the_output_shape():
    rng = np.random.default_rng(2)
    x = rng.random((8, 2))
    y = np.sin(3 * x[:, :1]) * Z[None]  # rank 1
    em = OutputEmulator().fit(x, y)
    assert em.n_components_ == 1
    post = em.posterior(torch.as_tensor(rng.random((6, 2, 2))))
    s = SobolQMCNormalSampler(torch.Size([16]), seed=0)(post)
    assert s.shape == (16, 6, 2, Z.size)
    np.testing.assert_allclose(s.mean(0).detach().numpy(), post.mean.detach().numpy(),
                               atol=0.5 * float(post.variance.max().sqrt()) + 1e-9)


@pytest.mark.parametrize("n_out", [1, 3])
def test_direct_score_prediction_matches_botorch_posterior(n_out):
    rng = np.random.default_rng(4)
    x = rng.random((15, 3))
    y = np.c_[np.sin(3 * x[:, 0]), x[:, 1] ** 2, x[:, 0] * x[:, 2]][:, :n_out]
    em = OutputEmulator(variance_fraction=1.0).fit(x, y)
    xt = torch.as_tensor(rng.random((4, 2, 3)))
    mean, chol = em._gp.predict(xt)
    # botorch's posterior of the same fitted model is the reference implementation
    with torch.no_grad():
        ref = em.score_model_.posterior(xt)
        ref_mean = ref.mean.reshape(4, 2, -1)
        ref_cov = ref.distribution.covariance_matrix  # (4, 2 k, 2 k)
        interleaved = getattr(ref.distribution, "_interleaved", False)
    np.testing.assert_allclose(mean.numpy(), ref_mean.numpy(), rtol=1e-6, atol=1e-8)
    k = em.n_components_
    for c in range(k):
        cov = (chol[c] @ chol[c].transpose(-1, -2)).numpy()
        if k == 1:
            ref_c = ref_cov.numpy()
        elif interleaved:
            ref_c = ref_cov[:, c::k, c::k].numpy()
        else:  # component-major blocks
            ref_c = ref_cov[:, 2 * c:2 * c + 2, 2 * c:2 * c + 2].numpy()
        np.testing.assert_allclose(cov, ref_c, rtol=1e-5, atol=1e-9)


def test_fitted_discrepancy_misfit_is_the_deviance():
    from profshape.search.composite import composite_misfit

    data = _dataset()
    layout = OutputLayout(data, discrepancy_index=1, discrepancy_log10_bounds=(1.0, 3.0))
    preds = {"a": _prediction(0.001), "b": _prediction(-0.002)}
    y = layout.vector(preds)
    u = np.array([0.2, 0.75])  # discrepancy 10**(1 + 0.75 * 2) m/s
    ref = evaluate_misfit(data, preds, discrepancy_sigma_m_s=10 ** 2.5)
    assert float(composite_misfit(layout, y, u)) == pytest.approx(-2 * ref.log_likelihood,
                                                                  rel=1e-12)
    assert float(composite_misfit(OutputLayout(data), y, u)) == pytest.approx(
        evaluate_misfit(data, preds).chi2, rel=1e-12)
