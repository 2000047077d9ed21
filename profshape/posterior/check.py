"""Posterior predictive check of the surrogate posterior against the real forward model.

A subset of posterior draws is run through ``problem.evaluate``; for each
draw the real log-likelihood is compared with the surrogate's prediction
(mean and standard deviation). Two further summaries help read the result:

- the misfits (reduced chi-square) of the draws against the best trial;
- ``2 (l_best - l_draw)``, which for a near-Gaussian posterior under a flat
  prior follows a chi-square law with d degrees of freedom (the Laplace
  approximation; e.g. Gelman et al. 2013, Bayesian Data Analysis, 3rd ed.,
  section 4.1), so its mean should be close to d.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import ConvergenceWarning

__all__ = ["PosteriorCheck", "PosteriorCheckWarning", "judge_check"]

#: |z| above this counts a draw as disagreeing with the surrogate.
_Z_LIMIT = 3.0


class PosteriorCheckWarning(ConvergenceWarning):
    """The surrogate posterior disagrees with forward runs of its own draws."""


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
        Failed draws over all; disagreeing draws (|z| > 3) over ok draws.
    median_difference_nats : float
        Median of real minus predicted log-likelihood over ok draws [nats].
    best_reduced_chi2 : float
        Reduced chi-square of the best trial seen.
    median_reduced_chi2 : float
        Median reduced chi-square of the ok draws.
    mean_delta_chi2 : float
        Mean of ``2 (l_best - l_draw)`` over ok draws (about d for a
        near-Gaussian posterior).
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

    def summary(self) -> dict[str, Any]:
        """The scalar fields as a dict (JSON-ready)."""
        return {
            k: getattr(self, k)
            for k in (
                "n_draws", "n_ok", "n_failed", "failed_fraction", "disagree_fraction",
                "median_difference_nats", "best_reduced_chi2", "median_reduced_chi2",
                "mean_delta_chi2", "passed", "message", "failure_reasons",
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
    tolerance_nats, max_disagree_fraction, max_failed_fraction : float
        See :class:`~profshape.posterior.PosteriorSettings`.
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
    if n_ok and disagree_fraction > max_disagree_fraction:
        problems.append(
            f"{disagree_fraction:.0%} of ok draws have a real log-likelihood more than "
            f"{_Z_LIMIT:g} sigma from the surrogate's (median real - predicted = "
            f"{median_diff:+.2f} nats); refine the surrogate (n_refine_rounds) or run more trials"
        )
    if n and n_ok == 0:
        problems.append("no checked draw ran successfully")
    passed = not problems
    message = (
        f"posterior check on {n} draws: {n_ok} ok, median reduced chi2 {median_rchi:.3g} "
        f"(best trial {best_reduced_chi2:.3g}), {disagree_fraction:.0%} disagree with the surrogate"
        if passed
        else "posterior check failed: " + "; ".join(problems)
    )
    if warn and not passed:
        warnings.warn(message + ".", PosteriorCheckWarning, stacklevel=3)
    return PosteriorCheck(
        table=table, n_draws=n, n_ok=n_ok, n_failed=n_failed, failed_fraction=failed_fraction,
        disagree_fraction=disagree_fraction, median_difference_nats=median_diff,
        best_reduced_chi2=float(best_reduced_chi2), median_reduced_chi2=median_rchi,
        mean_delta_chi2=mean_delta, passed=passed, message=message, failure_reasons=reasons,
    )
