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
    settings = PosteriorSettings(method="exact", n_walkers=16, n_steps=700, burn_in=200,
                                 n_check_draws=4, seed=5)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        return sample_posterior(problem, trials, settings)
