"""Family ranking: data made with one family rank that family first."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from profshape.exceptions import ConvergenceWarning, InputDataError
from profshape.posterior import PosteriorSettings, compare_families, sample_posterior

from ._linear import exact_posterior, make_problem, make_trials

TRUTH = np.array([-1.0, 0.5])  # a tilted line: the degree-1 family
POINTS = (("300V", 300.0), ("250V", 250.0))


@pytest.fixture(scope="module")
def entries():
    out = []
    for degree in (0, 1, 2):
        problem, _ = make_problem(TRUTH, degree=degree, n_z=30, seed=21, points=POINTS)
        # a converged search: design points plus a tight cluster around the optimum
        trials = make_trials(problem, n_design=16, n_local=64, seed=degree, spread=0.5)
        out.append((f"degree {degree}", problem, trials))
    return out


def test_true_family_ranks_first(entries):
    # BIC (Schwarz 1978) penalises the richer family by ln(n) per coefficient, more than
    # its expected likelihood gain of 1/2 nat per extra coefficient (chi-square with 1 dof);
    # the poorer family cannot fit the tilt at all.
    table = compare_families(entries)
    assert list(table["label"]) == ["degree 1", "degree 2", "degree 0"]
    assert list(table["rank"]) == [1, 2, 3]
    assert list(table["n_coefficients"]) == [2, 3, 1]
    assert set(table["n_data"]) == {60}
    best = table.iloc[0]
    assert best["verdict"] == "best"
    assert table.iloc[2]["verdict"] == "very strong evidence against"
    np.testing.assert_allclose(table["bic_weight"].sum(), 1.0)
    # BIC from its definition: k ln n - 2 ln L
    row = table.iloc[1]
    np.testing.assert_allclose(row["bic"], 3 * math.log(60) - 2 * row["best_log_likelihood"])
    assert table.set_index("label").loc["degree 0", "delta_bic"] > 10


def test_best_log_likelihood_is_near_the_least_squares_optimum(entries):
    # The trials' best log-likelihood is within a fraction of a nat of the closed-form
    # maximum (least squares, Bishop 2006 section 3.1.1).
    for _, problem, trials in entries:
        mean, _ = exact_posterior(problem)
        ll_max = problem.evaluate(mean).misfit.log_likelihood
        best = trials.loc[trials["status"] == "ok", "log_likelihood"].max()
        assert ll_max - 0.5 < best <= ll_max + 1e-9


def test_laplace_evidence_matches_closed_form(entries):
    # For a Gaussian likelihood whose mass lies inside the prior box, the evidence under
    # the uniform prior is exactly L_max (2 pi)^(k/2) |Sigma|^(1/2) / volume (Bishop 2006,
    # eq. 4.135, Laplace approximation, exact for a Gaussian).
    label, problem, trials = entries[1]
    mean, cov = exact_posterior(problem)
    ll_max = problem.evaluate(mean).misfit.log_likelihood
    volume = np.prod(problem.bounds[:, 1] - problem.bounds[:, 0])
    exact = ll_max + 0.5 * 2 * math.log(2 * math.pi) + 0.5 * np.linalg.slogdet(cov)[1] \
        - math.log(volume)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        post = sample_posterior(problem, trials, PosteriorSettings(
            method="exact", n_walkers=8, n_steps=600, burn_in=150, n_check_draws=0))
    table = compare_families([entries[1]], posteriors={label: post})
    # Monte Carlo error of ln det(cov) from ESS ~ 500: about sqrt(2 k / ESS) ~ 0.1
    np.testing.assert_allclose(table["log_evidence_laplace"].iloc[0], exact, atol=0.3)


def test_compare_refuses_bad_input(entries):
    with pytest.raises(InputDataError, match="criterion must be"):
        compare_families(entries, criterion="waic")
    with pytest.raises(InputDataError, match="labels must be unique"):
        compare_families([entries[0], entries[0]])
    other, _ = make_problem(TRUTH, degree=1, n_z=10, seed=1)
    with pytest.raises(InputDataError, match="different numbers of data values"):
        compare_families([entries[0], ("small", other, entries[1][2])])
    with pytest.raises(InputDataError, match="needs a posterior"):
        compare_families(entries, criterion="laplace")
