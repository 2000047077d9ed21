"""Ranking shape families fitted to the same data.

The default criterion is the Bayesian information criterion (Schwarz 1978,
Annals of Statistics 6:461),

.. math:: \\mathrm{BIC} = k \\ln n - 2 \\ln \\hat L,

with k the number of fitted coefficients (shape coefficients plus any
per-point scales or discrepancy), n the number of data values and
:math:`\\hat L` the best likelihood found. ``-BIC / 2`` approximates the log
evidence up to a constant common to all families, so BIC differences give
approximate Bayes factors; Kass and Raftery (1995, JASA 90:773) read
differences of 0-2 as "not worth more than a bare mention", 2-6 "positive",
6-10 "strong" and above 10 "very strong". BIC is chosen because it needs
only the best log-likelihood of each family's trials, penalises every
coefficient, and is consistent (picks the true family as n grows).
AIC (Akaike 1974) is reported alongside.

When posteriors are given, a sample-based Laplace estimate of the log
evidence is added (Lewis and Raftery 1997, JASA 92:648):
``ln Z ~ ln L(MAP) + ln p(MAP) + (k/2) ln 2 pi + (1/2) ln det Sigma``, with
Sigma the posterior covariance of the sample and p the prior density (uniform
in the bounds: ``1 / prod(upper - lower)``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import InputDataError
from .protocol import PosteriorProblem
from .result import PosteriorResult

__all__ = ["compare_families", "evidence_verdict"]


def evidence_verdict(delta: float) -> str:
    """Kass and Raftery (1995) wording for a BIC difference to the best family."""
    if not math.isfinite(delta):
        return "no ok trials"
    if delta < 1e-12:
        return "best"
    if delta <= 2:
        return "not worth more than a bare mention"
    if delta <= 6:
        return "positive evidence against"
    if delta <= 10:
        return "strong evidence against"
    return "very strong evidence against"


def _laplace_log_evidence(problem: PosteriorProblem, posterior: PosteriorResult) -> float:
    x = posterior.samples[list(problem.names)].to_numpy(dtype=float)
    k = x.shape[1]
    cov = np.atleast_2d(np.cov(x.T))
    sign, logdet = np.linalg.slogdet(cov)
    if sign <= 0:
        return math.nan
    b = np.asarray(problem.bounds, dtype=float)
    log_prior = -float(np.sum(np.log(b[:, 1] - b[:, 0])))
    return float(posterior.map_log_likelihood + log_prior + 0.5 * k * math.log(2 * math.pi)
                 + 0.5 * logdet)


def compare_families(
    entries: Sequence[tuple[str, Any, pd.DataFrame]],
    *,
    posteriors: Mapping[str, PosteriorResult] | None = None,
    criterion: str = "bic",
) -> pd.DataFrame:
    """Rank families fitted to the same data.

    Parameters
    ----------
    entries : sequence of (label, problem, trials)
        One per family: a label, its CalibrationProblem and its trial log.
        All problems must share the same data (same number of data values).
    posteriors : mapping of label to PosteriorResult, optional
        Adds ``log_evidence_laplace`` for those labels.
    criterion : {"bic", "aic", "laplace"}, default="bic"
        What the ranking sorts on (lower BIC/AIC, higher evidence is better).

    Returns
    -------
    DataFrame
        One row per family, best first: ``rank``, ``label``, ``family``,
        ``n_coefficients``, ``n_data``, ``n_ok_trials``, ``best_log_likelihood``,
        ``best_reduced_chi2``, ``aic``, ``bic``, ``delta_bic``, ``bic_weight``
        (``exp(-delta/2)`` normalised: approximate posterior probability under
        equal prior odds), ``verdict`` and ``log_evidence_laplace``.

    Raises
    ------
    InputDataError
        Empty input, duplicate labels, unknown criterion, or different data sizes.
    """
    criterion = str(criterion).lower()
    if criterion not in ("bic", "aic", "laplace"):
        raise InputDataError(
            f"compare_families: criterion must be 'bic', 'aic' or 'laplace'; got {criterion!r}."
        )
    entries = list(entries)
    if len(entries) < 1:
        raise InputDataError("compare_families: give at least one (label, problem, trials).")
    labels = [e[0] for e in entries]
    if len(set(labels)) != len(labels):
        raise InputDataError(f"compare_families: labels must be unique; got {labels}.")
    posteriors = dict(posteriors or {})
    if criterion == "laplace" and set(posteriors) != set(labels):
        raise InputDataError(
            "compare_families: criterion 'laplace' needs a posterior for every label; missing "
            f"{sorted(set(labels) - set(posteriors))}."
        )
    rows = []
    for label, problem, trials in entries:
        n = int(problem.dataset.n_data)
        k = int(problem.dim)
        ll = pd.to_numeric(trials["log_likelihood"], errors="coerce")
        ok = (trials["status"].astype(str) == "ok") & np.isfinite(ll)
        best = float(ll[ok].max()) if ok.any() else -math.inf
        rchi = pd.to_numeric(trials.loc[ok, "reduced_chi2"], errors="coerce") \
            if "reduced_chi2" in trials else pd.Series(dtype=float)
        post = posteriors.get(label)
        if post is not None and math.isfinite(post.map_log_likelihood):
            best = max(best, float(post.map_log_likelihood))
        rows.append({
            "label": label, "family": getattr(problem.family, "name", ""),
            "n_coefficients": k, "n_data": n, "n_ok_trials": int(ok.sum()),
            "best_log_likelihood": best,
            "best_reduced_chi2": float(rchi.min()) if len(rchi) else math.nan,
            "aic": 2 * k - 2 * best,
            "bic": k * math.log(n) - 2 * best,
            "log_evidence_laplace": _laplace_log_evidence(problem, post) if post is not None
            else math.nan,
        })
    sizes = {r["n_data"] for r in rows}
    if len(sizes) > 1:
        raise InputDataError(
            f"compare_families: the problems have different numbers of data values "
            f"{dict((r['label'], r['n_data']) for r in rows)}; compare families on the same data."
        )
    table = pd.DataFrame(rows)
    finite_bic = table["bic"][np.isfinite(table["bic"])]
    best_bic = float(finite_bic.min()) if len(finite_bic) else math.nan
    table["delta_bic"] = table["bic"] - best_bic
    w = np.exp(-0.5 * table["delta_bic"].to_numpy(dtype=float))
    w = np.where(np.isfinite(w), w, 0.0)
    table["bic_weight"] = w / w.sum() if w.sum() > 0 else np.nan
    table["verdict"] = [evidence_verdict(v) for v in table["delta_bic"]]
    key, ascending = {"bic": ("bic", True), "aic": ("aic", True),
                      "laplace": ("log_evidence_laplace", False)}[criterion]
    table = table.sort_values(key, ascending=ascending, kind="stable").reset_index(drop=True)
    table.insert(0, "rank", np.arange(1, len(table) + 1))
    return table
