"""Coverage on synthetic truth: the 90 % band covers the true profile about 90 % of the time.

With a linear-Gaussian problem and a flat prior the Bayesian central interval
of the log10 profile at any z is also an exact 90 % confidence interval
(Bishop 2006, section 3.3: the posterior is N(m_N, S_N) with S_N the
least-squares covariance), so across repeated noisy data sets the number of
covering bands is Binomial(N, 0.9) (bounds from scipy.stats.binom).

This test runs the sampler layer (emcee on the exact log-likelihood) and the
band code; benchmarks/posterior_coverage.py runs the same check through the
GP-surrogate path.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from profshape.posterior.bands import profile_band
from profshape.posterior.sampler import run_ensemble

from ._linear import BOUNDS, V0_M_S, design_matrix, log10_profile

N_REPEATS = 80
LEVEL = 0.90
Z_CHECK_M = np.array([0.002, 0.025, 0.048])


def test_band_coverage_linear_gaussian():
    rng = np.random.default_rng(2024)
    truth = np.array([-1.0, 0.4])
    lower = np.array([BOUNDS[0][0], BOUNDS[1][0]])
    width = np.array([BOUNDS[0][1], BOUNDS[1][1]]) - lower
    z_data = np.linspace(0.004, 0.046, 12)
    phi = design_matrix(z_data, 1)
    sigma = 400.0
    v_true = V0_M_S + phi @ truth
    true_profile = 10.0 ** log10_profile(truth, Z_CHECK_M)[0]
    covered = np.zeros(len(Z_CHECK_M), dtype=int)
    for rep in range(N_REPEATS):
        v_obs = v_true + sigma * rng.standard_normal(len(z_data))

        def log_prob(u, v_obs=v_obs):
            c = lower + u * width
            r = v_obs[None, :] - (V0_M_S + c @ phi.T)
            return -0.5 * np.sum(r * r, axis=1) / sigma**2

        start = (truth - lower) / width + 0.01 * rng.standard_normal((16, 2))
        run = run_ensemble(log_prob, np.clip(start, 0.01, 0.99), n_steps=350, burn_in=100,
                           seed=rep)
        coeffs = lower + run.samples * width
        values = 10.0 ** log10_profile(coeffs, Z_CHECK_M)
        band = profile_band(values, Z_CHECK_M, levels=(LEVEL,))
        covered += ((band[f"lower_{LEVEL:g}"] <= true_profile)
                    & (true_profile <= band[f"upper_{LEVEL:g}"])).to_numpy()
    lo, hi = stats.binom.interval(0.998, N_REPEATS, LEVEL)
    print("covered", covered, "of", N_REPEATS, "bounds", lo, hi)
    assert np.all((covered >= lo) & (covered <= hi)), (covered, lo, hi)
