"""Expected improvement against its closed form and botorch's implementations."""

from __future__ import annotations

import numpy as np
import torch
from botorch.acquisition import ExpectedImprovement, LogExpectedImprovement
from scipy.stats import norm

from profshape.search.acquisition import make_acquisition, optimize_acquisition
from profshape.search.surrogate import fit_objective_model, gp_with_fixed_hyperparameters


def _data(n=8, d=2, seed=1):
    rng = np.random.default_rng(seed)
    u = rng.random((n, d))
    y = np.sin(6 * u[:, 0]) + u[:, 1] ** 2
    return u, y


def test_log_ei_matches_closed_form_and_botorch():
    u, y = _data()
    model = gp_with_fixed_hyperparameters(u, y, lengthscales=[0.3, 0.5], outputscale=1.2,
                                          noise_variance=1e-6)
    acq = make_acquisition(model, u, y, q=1)
    x = torch.rand(50, 1, 2, dtype=torch.float64, generator=torch.Generator().manual_seed(3))
    with torch.no_grad():
        ours = acq(x).exp().numpy()
        post = model.posterior(x.squeeze(1))
        mu = post.mean.squeeze(-1).numpy()
        sd = post.variance.squeeze(-1).sqrt().numpy()
        ref_botorch = ExpectedImprovement(model, best_f=float(y.max()))(x).numpy()
        ref_log = LogExpectedImprovement(model, best_f=float(y.max()))(x).exp().numpy()
    # Jones, Schonlau and Welch (1998), J. Global Optim. 13:455, eq. (15), for maximisation:
    # EI = (mu - f*) Phi(z) + sigma phi(z), z = (mu - f*) / sigma
    z = (mu - y.max()) / sd
    closed = (mu - y.max()) * norm.cdf(z) + sd * norm.pdf(z)
    np.testing.assert_allclose(ours, closed, rtol=1e-6, atol=1e-12)
    np.testing.assert_allclose(ours, ref_botorch, rtol=1e-6, atol=1e-12)  # botorch EI
    np.testing.assert_allclose(ours, ref_log, rtol=1e-9)  # botorch LogEI (Ament et al. 2023)


def test_batch_acquisition_proposes_distinct_points_and_respects_pending():
    u, y = _data(n=10)
    model = fit_objective_model(u, y)
    acq = make_acquisition(model, u, y, q=2, mc_samples=64, seed=0)
    cand, _ = optimize_acquisition(acq, 2, q=2, num_restarts=2, raw_samples=32, seed=0)
    assert cand.shape == (2, 2)
    assert np.all((cand >= 0) & (cand <= 1))
    assert np.linalg.norm(cand[0] - cand[1]) > 1e-3
    # with the first candidate pending, the next proposal moves away from it
    acq_p = make_acquisition(model, u, y, q=1, pending_u=cand[:1], mc_samples=64, seed=0)
    nxt, _ = optimize_acquisition(acq_p, 2, q=1, num_restarts=2, raw_samples=32, seed=0)
    assert np.linalg.norm(nxt[0] - cand[0]) > 1e-3
