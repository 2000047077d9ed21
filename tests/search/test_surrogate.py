"""GP surrogate against scikit-learn's GaussianProcessRegressor."""

from __future__ import annotations

import numpy as np
import torch
from gpytorch.kernels import MaternKernel
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern

from profshape.search.surrogate import fit_objective_model, gp_with_fixed_hyperparameters


def test_posterior_matches_sklearn_with_fixed_hyperparameters():
    rng = np.random.default_rng(0)
    u = rng.random((15, 3))
    y = np.cos(4 * u[:, 0]) - u[:, 1] + 0.3 * u[:, 2]
    ls, scale, noise = [0.4, 0.7, 1.3], 1.7, 1e-3
    model = gp_with_fixed_hyperparameters(u, y, lengthscales=ls, outputscale=scale,
                                          noise_variance=noise)
    # scikit-learn reference (Rasmussen and Williams 2006, eq. 2.25-2.26): same kernel,
    # hyperparameters fixed (optimizer=None), noise as alpha so the predictive variance
    # is of the latent function, as botorch's posterior without observation noise.
    kernel = ConstantKernel(scale, "fixed") * Matern(length_scale=ls, length_scale_bounds="fixed",
                                                     nu=2.5)
    ref = GaussianProcessRegressor(kernel, alpha=noise, optimizer=None, normalize_y=False)
    ref.fit(u, y)
    xt = rng.random((40, 3))
    mean_ref, std_ref = ref.predict(xt, return_std=True)
    with torch.no_grad():
        post = model.posterior(torch.as_tensor(xt))
    np.testing.assert_allclose(post.mean.squeeze(-1).numpy(), mean_ref, rtol=1e-6, atol=1e-8)
    np.testing.assert_allclose(post.variance.squeeze(-1).numpy(), std_ref**2, rtol=1e-5,
                               atol=1e-8)


def test_fitted_model_is_matern52_ard_and_refits():
    rng = np.random.default_rng(1)
    u = rng.random((20, 2))
    y = np.sin(8 * u[:, 0])  # depends on the first coordinate only
    model = fit_objective_model(u, y)
    kernel = model.covar_module
    assert isinstance(kernel, MaternKernel) and kernel.nu == 2.5
    ls = kernel.lengthscale.detach().numpy().ravel()
    assert ls.shape == (2,)
    assert ls[1] > 2 * ls[0]  # ARD: the irrelevant coordinate gets a long lengthscale
    # standardised outcome: the posterior at the data reproduces y (small noise)
    with torch.no_grad():
        mean = model.posterior(torch.as_tensor(u)).mean.squeeze(-1).numpy()
    np.testing.assert_allclose(mean, y, atol=0.05)
