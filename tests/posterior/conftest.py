"""Shared fixtures: the linear-Gaussian problem, its trials and an exact-likelihood posterior."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from profshape.exceptions import ConvergenceWarning
from profshape.posterior import PosteriorSettings, sample_posterior

from ._linear import make_problem, make_trials

TRUTH = np.array([-1.0, 0.4])


@pytest.fixture(scope="session")
def linear_case():
    problem, _ = make_problem(TRUTH, seed=3)
    trials = make_trials(problem, seed=1)
    return problem, trials


@pytest.fixture(scope="session")
def linear_posterior(linear_case):
    """Exact-likelihood posterior of the linear problem (cheap forward model)."""
    problem, trials = linear_case
    # 2500 steps: with 700 the band tests' median and 68 % width used up to 1.08 of their
    # tolerance over ten seeds (Monte-Carlo error of the chains); with 2500 at most 0.66
    # (tests/SEED_SWEEPS.md)
    settings = PosteriorSettings(method="exact", n_walkers=16, n_steps=2500, burn_in=300,
                                 n_check_draws=4, seed=5)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        return sample_posterior(problem, trials, settings)
