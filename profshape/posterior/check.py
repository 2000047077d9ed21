"""Posterior predictive check of the surrogate posterior against the real forward model.

A subset of posterior draws is run through ``problem.evaluate``; for each
draw the real log-likelihood is compared with the surrogate's prediction
(mean and standard deviation). Two further summaries help read the result:

- the misfits (reduced chi-square) of the draws against the best trial;
- ``2 (l_best - l_draw)``, which for a near-Gaussian posterior under a flat
  prior follows a chi-square law with d degrees of freedom (the Laplace
  approximation; e.g. Gelman et al. 2013, Bayesian Data Analysis, 3rd ed.,
  section 4.1; exact for a linear-Gaussian model, Bishop 2006 section 3.3).

The check *passes* only when both hold:

1. the real log-likelihoods agree with the surrogate's (or emulator's)
   prediction within its stated uncertainty: with calibrated z-scores a
   draw lands beyond 3 sigma with probability 0.27 %, so the check fails
   when the number of such draws is improbable under that rate (binomial
   tail below :data:`CHECK_ALPHA`) or exceeds ``max_disagree_fraction``;
2. the draws' ``2 (l_best - l_draw)`` is consistent with the chi-square law
   with d degrees of freedom (Kolmogorov-Smirnov test, p-value at least
   :data:`CHECK_ALPHA`): a posterior collapsed far narrower than the real
   likelihood gives values near 0, one far too wide gives values far above d.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from ..exceptions import PosteriorCheckWarning

__all__ = ["CHECK_ALPHA", "PosteriorCheck", "PosteriorCheckWarning", "judge_check"]

#: |z| above this counts a draw as disagreeing with the surrogate.
_Z_LIMIT = 3.0
#: Probability of |z| > 3 for a standard normal (scipy.stats.norm.sf).
_P_BEYOND = float(2.0 * stats.norm.sf(_Z_LIMIT))
#: Significance level of every statistical check (tail probabilities below it fail).
CHECK_ALPHA = 1e-3


@dataclass
class PosteriorCheck:
    """Result of the posterior predictive check.

    Attributes
    ----------
    table : DataFrame
        One row per checked draw: ``draw``, ``status``, ``reason``,
        ``predicted_log_likelihood``, ``predicted_std``, ``log_likelihood``,
        ``reduced_chi2``, ``z`` (standardised difference), and the draw's
        coefficients by parameter name.
    n_draws, n_ok, n_failed : int
    failed_fraction, disagree_fraction : float
        Failed draws over all; disagreeing draws (``|z| > 3``) over ok draws.
    median_difference_nats : float
        Median of real minus predicted log-likelihood over ok draws [nats].
    best_reduced_chi2 : float
        Reduced chi-square of the best trial seen.
    median_reduced_chi2 : float
        Median reduced chi-square of the ok draws.
    mean_delta_chi2 : float
        Mean of ``2 (l_best - l_draw)`` over ok draws (about d for a
        near-Gaussian posterior).
    n_parameters : int
        d, the degrees of freedom of the chi-square law of ``2 (l_best - l_draw)``.
    delta_chi2_p_value : float
        Kolmogorov-Smirnov p-value of the draws' ``2 (l_best - l_draw)``
        against chi-square with d degrees of freedom (NaN when not tested).
    agreement_p_value : float
        Binomial tail probability of at least the observed number of ``|z| > 3``
        draws if the stated uncertainty were right.
    advice : str
        What to do when the check fails (empty when it passes).
    passed : bool
        No warning condition met.
    message : str
        One line summary; names the failed condition when ``passed`` is False.
    """

    table: pd.DataFrame
    n_draws: int
    n_ok: int
    n_failed: int
    failed_fraction: float
    disagree_fraction: float
    median_difference_nats: float
    best_reduced_chi2: float
    median_reduced_chi2: float
    mean_delta_chi2: float
    passed: bool
    message: str
    failure_reasons: dict[str, int] = field(default_factory=dict)
    n_parameters: int = 0
    delta_chi2_p_value: float = math.nan
    agreement_p_value: float = math.nan
    advice: str = ""

    def summary(self) -> dict[str, Any]:
        """The scalar fields as a dict (JSON-ready)."""
        return {
            k: getattr(self, k)
            for k in (
                "n_draws", "n_ok", "n_failed", "failed_fraction", "disagree_fraction",
                "median_difference_nats", "best_reduced_chi2", "median_reduced_chi2",
                "mean_delta_chi2", "passed", "message", "failure_reasons",
                "n_parameters", "delta_chi2_p_value", "agreement_p_value", "advice",
            )
        }


def judge_check(
    table: pd.DataFrame,
    *,
    best_log_likelihood: float,
    best_reduced_chi2: float,
    tolerance_nats: float,
    max_disagree_fraction: float,
    max_failed_fraction: float,
    n_parameters: int | None = None,
    best_log_prior: float = 0.0,
    warn: bool = True,
) -> PosteriorCheck:
    """Summarise a check table and warn when the surrogate and the real model disagree.

    Parameters
    ----------
    table : DataFrame
        Columns ``status``, ``reason``, ``predicted_log_likelihood``,
        ``predicted_std``, ``log_likelihood``, ``reduced_chi2``.
    best_log_likelihood, best_reduced_chi2 : float
        Of the best trial seen (reference for the misfit comparison).
        An optional column ``log_prior`` (log prior density of each draw) is
        added to the log-likelihood in the chi-square consistency test.
    tolerance_nats, max_disagree_fraction, max_failed_fraction : float
        See :class:`~profshape.posterior.PosteriorSettings`.
    n_parameters : int, optional
        d; when given (and at least 3 draws ran), ``2 (l_best - l_draw)`` is
        tested against the chi-square law with d degrees of freedom.
    best_log_prior : float, default=0.0
        Log prior density at the best trial (0 for the uniform prior).
    warn : bool, default=True
        Emit :class:`PosteriorCheckWarning` when the check fails.
    """
    table = table.copy()
    ok = (table["status"] == "ok").to_numpy() & np.isfinite(table["log_likelihood"].to_numpy())
    scale = np.sqrt(table["predicted_std"].to_numpy() ** 2 + tolerance_nats**2)
    diff = table["log_likelihood"].to_numpy() - table["predicted_log_likelihood"].to_numpy()
    table["z"] = np.where(ok, diff / scale, np.nan)
    n = len(table)
    n_ok = int(ok.sum())
    n_failed = n - n_ok
    failed_fraction = n_failed / n if n else 0.0
    z = table["z"].to_numpy()[ok]
    disagree_fraction = float(np.mean(np.abs(z) > _Z_LIMIT)) if n_ok else 0.0
    median_diff = float(np.median(diff[ok])) if n_ok else math.nan
    rchi = table["reduced_chi2"].to_numpy()[ok]
    median_rchi = float(np.median(rchi)) if n_ok else math.nan
    ll = table["log_likelihood"].to_numpy()[ok]
    best = max(best_log_likelihood, float(ll.max())) if n_ok else best_log_likelihood
    mean_delta = float(np.mean(2.0 * (best - ll))) if n_ok else math.nan
    n_beyond = int(np.sum(np.abs(z) > _Z_LIMIT))
    agreement_p = float(stats.binom.sf(n_beyond - 1, n_ok, _P_BEYOND)) if n_beyond else 1.0
    delta_p = math.nan
    if n_parameters and n_ok >= 3:
        lp = table["log_prior"].to_numpy()[ok] if "log_prior" in table.columns \
            else np.zeros(n_ok)
        lpost = ll + lp
        ref = max(best_log_likelihood + best_log_prior, float(lpost.max()))
        delta = 2.0 * (ref - lpost)
        delta_p = float(stats.kstest(delta, stats.chi2(int(n_parameters)).cdf).pvalue)
    reasons: dict[str, int] = {}
    for r in table.loc[~ok, "reason"].astype(str):
        key = r.split("|")[0].strip()[:120] or "unknown"
        reasons[key] = reasons.get(key, 0) + 1
    problems = []
    if n and failed_fraction > max_failed_fraction:
        problems.append(
            f"{n_failed} of {n} draws failed in the forward model "
            f"({failed_fraction:.0%} > {max_failed_fraction:.0%})"
        )
    advice = []
    if n_ok and (disagree_fraction > max_disagree_fraction or agreement_p < CHECK_ALPHA):
        problems.append(
            f"{n_beyond} of {n_ok} ok draws ({disagree_fraction:.0%}) have a real log-likelihood "
            f"more than {_Z_LIMIT:g} sigma from the surrogate's (median real - predicted = "
            f"{median_diff:+.2f} nats; chance {agreement_p:.2g} if its stated uncertainty were "
            "right)"
        )
        advice.append("give the posterior stage more forward runs (posterior budget, "
                      "refinement rounds) or run more search trials, then sample again")
    if math.isfinite(delta_p) and delta_p < CHECK_ALPHA:
        kind = "narrower" if mean_delta < float(n_parameters or 0) else "wider"
        problems.append(
            f"the draws' 2 (l_best - l) (mean {mean_delta:.3g}) are not consistent with "
            f"chi-square with {n_parameters} degrees of freedom (mean {n_parameters}; "
            f"Kolmogorov-Smirnov p = {delta_p:.2g}): the posterior is {kind} than the real "
            "likelihood supports"
        )
        advice.append("the surrogate posterior does not follow the real likelihood: refine it "
                      "with more posterior forward runs; if it persists, check for several "
                      "modes or a best fit on a bound")
    if n and n_ok == 0:
        problems.append("no checked draw ran successfully")
        advice.append("the forward model fails at posterior draws: read the failure reasons")
    elif n and failed_fraction > max_failed_fraction:
        advice.append("the forward model fails at many posterior draws: read the failure "
                      "reasons, narrow the bounds away from failing regions")
    passed = not problems
    message = (
        f"posterior check on {n} draws: {n_ok} ok, median reduced chi2 {median_rchi:.3g} "
        f"(best trial {best_reduced_chi2:.3g}), {disagree_fraction:.0%} disagree with the surrogate"
        if passed
        else "posterior check failed: " + "; ".join(problems)
        + (". What to do: " + "; ".join(advice) if advice else "")
    )
    if warn and not passed:
        warnings.warn(message + ".", PosteriorCheckWarning, stacklevel=3)
    return PosteriorCheck(
        table=table, n_draws=n, n_ok=n_ok, n_failed=n_failed, failed_fraction=failed_fraction,
        disagree_fraction=disagree_fraction, median_difference_nats=median_diff,
        best_reduced_chi2=float(best_reduced_chi2), median_reduced_chi2=median_rchi,
        mean_delta_chi2=mean_delta, passed=passed, message=message, failure_reasons=reasons,
        n_parameters=int(n_parameters or 0), delta_chi2_p_value=delta_p,
        agreement_p_value=agreement_p, advice="; ".join(advice),
    )
