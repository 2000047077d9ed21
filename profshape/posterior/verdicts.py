"""Checks that fail loudly: can the model match the data, and can the posterior be trusted?

Each check returns a :class:`CheckOutcome` (``passed``, a one-line
``message``, ``advice`` when it fails, and the numbers behind it). The
report prints them in ``summary.json``, ``report.md`` and on the terminal:

- ``goodness_of_fit``: the best fit's chi-square against the chi-square law
  with n - p degrees of freedom (``scipy.stats.chi2.sf``); a tail probability
  below :data:`~profshape.posterior.check.CHECK_ALPHA` means this family or
  model cannot match the data, and the check names the positions and
  observables that dominate the misfit;
- ``predictive``: the posterior predictive check
  (:func:`~profshape.posterior.check.judge_check`);
- ``refinement``: the surrogate's stated error of the log-likelihood at
  posterior draws fell below ``refine_threshold_nats`` within the budget;
- ``sampler``: one integrated autocorrelation time tau (the largest over the
  coefficients and ensembles, emcee's estimator) and one effective sample
  size ``sum over ensembles of n_walkers * n_kept_steps / tau``; fails when a
  chain is shorter than 50 tau or the acceptance fraction is odd;
- ``best_in_intervals``: the best trial and the MAP lie inside the posterior's
  own 95 % intervals;
- ``map_vs_best``: the MAP and the best search trial agree, or the difference
  is explained.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, cast

import numpy as np
import pandas as pd
from scipy import stats

from .check import CHECK_ALPHA
from .protocol import PosteriorProblem

__all__ = [
    "CheckOutcome",
    "best_fit",
    "best_fit_residuals",
    "best_in_intervals",
    "checks_markdown",
    "goodness_of_fit",
    "map_vs_best",
    "predictive",
    "refinement",
    "run_checks",
    "sampler",
    "terminal_lines",
]

#: Level of the intervals the best fit must lie in.
INTERVAL_LEVEL = 0.95
#: A coefficient within this fraction of its range from a bound sits on the bound.
BOUND_FRACTION = 0.01


@dataclass
class CheckOutcome:
    """The outcome of one check.

    Attributes
    ----------
    name : str
    passed : bool
    message : str
        One line: what was found (names the failing items).
    advice : str
        What to do when the check fails (may explain a passing difference too).
    details : dict
        The numbers behind the verdict (JSON-ready).
    """

    name: str
    passed: bool
    message: str
    advice: str = ""
    details: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return {"name": self.name, "passed": bool(self.passed), "message": self.message,
                "advice": self.advice, "details": self.details}

    def line(self) -> str:
        """One terminal line: ``check <name>: PASSED|FAILED - <message>``."""
        verdict = "PASSED" if self.passed else "FAILED"
        text = f"check {self.name}: {verdict} - {self.message}"
        if self.advice and not self.passed:
            text += f" What to do: {self.advice}"
        return text


# ------------------------------------------------------------ goodness of fit
def best_fit_residuals(problem: PosteriorProblem, row: pd.Series) -> pd.DataFrame:
    """Per-value chi-square contributions of one trial-log row (from its stored predictions)."""
    from ..likelihood import residual_table
    from .emulated import predictions_from_json

    preds = predictions_from_json(row.get("predictions"))
    if not preds:
        return pd.DataFrame()
    sigma = None
    if getattr(problem, "fit_discrepancy", False):
        coeffs = np.array([float(row[n]) for n in problem.names])
        sigma = problem.discrepancy_sigma_m_s(coeffs)
    return residual_table(problem.dataset, preds, problem.likelihood,
                          discrepancy_sigma_m_s=sigma)


def goodness_of_fit(chi2: float, dof: int, residuals: pd.DataFrame | None = None,
                    *, n_top: int = 3, where: str = "the best fit") -> CheckOutcome:
    """Chi-square of the best fit against chi-square with ``dof`` = n - p degrees of freedom.

    Parameters
    ----------
    chi2 : float
        The best fit's (weighted) chi-square.
    dof : int
        n - p.
    residuals : DataFrame, optional
        :func:`~profshape.likelihood.residual_table` of the best fit: used to
        name the positions and observables that dominate the misfit.
    n_top : int, default=3
        How many positions to name.
    where : str
        What the best fit is (for the message).
    """
    dof = max(int(dof), 1)
    if not math.isfinite(chi2):
        return CheckOutcome("goodness_of_fit", False, f"{where} has no finite chi-square",
                            "run the search until a trial succeeds", {"chi2": None, "dof": dof})
    p = float(stats.chi2.sf(chi2, dof))
    details: dict[str, Any] = {"chi2": float(chi2), "dof": dof, "reduced_chi2": chi2 / dof,
                               "tail_probability": p, "alpha": CHECK_ALPHA}
    dominant = ""
    if residuals is not None and len(residuals):
        total = float(residuals["chi2"].sum()) or 1.0
        per_obs = (residuals.groupby(["label", "observable"], sort=False)["chi2"].sum()
                   .sort_values(ascending=False))
        shares = [(*cast(tuple[str, str], key), float(v)) for key, v in per_obs.items()]
        details["per_observable_share"] = {f"{lab}/{obs}": v / total for lab, obs, v in shares}
        top = residuals.sort_values("chi2", ascending=False).head(int(n_top))
        items = []
        for r in top.to_dict("records"):
            pos = (f" at z = {1e3 * r['z_m']:.3g} mm" if math.isfinite(r["z_m"]) else "")
            items.append(f"{r['label']} {r['observable']}{pos} ({r['chi2'] / total:.0%} of the "
                         f"chi-square, residual {r['normalised_residual']:+.1f} sigma)")
        details["dominant"] = [
            {k: (None if isinstance(v, float) and not math.isfinite(v) else v)
             for k, v in r.items()} for r in top.to_dict("records")]
        lab, obs, v = shares[0]
        dominant = (f"; the misfit is dominated by {', '.join(items)}; by observable "
                    f"{lab}/{obs} holds {v / total:.0%}")
    if p < CHECK_ALPHA:
        return CheckOutcome(
            "goodness_of_fit", False,
            f"this family or model cannot match the data: {where} has chi-square {chi2:.4g} "
            f"with n - p = {dof} degrees of freedom (reduced {chi2 / dof:.3g}, tail probability "
            f"{p:.2g} < {CHECK_ALPHA:g}){dominant}.",
            "try another shape family (profshape.posterior.compare_families), free per-point "
            "scales or a fitted model discrepancy; check the uncertainties of the data at the "
            "positions named; a search that has not converged can also cause this (resume it "
            "with a larger budget).",
            details)
    return CheckOutcome(
        "goodness_of_fit", True,
        f"{where} has chi-square {chi2:.4g} with n - p = {dof} degrees of freedom (reduced "
        f"{chi2 / dof:.3g}, tail probability {p:.2g} >= {CHECK_ALPHA:g}){dominant}.",
        "", details)


# ------------------------------------------------------------ the posterior
def predictive(check: Any) -> CheckOutcome:
    """The posterior predictive check as a :class:`CheckOutcome`."""
    if check is None:
        return CheckOutcome("predictive", False, "no posterior predictive check was run "
                            "(n_check_draws = 0)", "set n_check_draws > 0", {})
    summary = check.summary() if hasattr(check, "summary") else dict(check)
    details = {k: v for k, v in summary.items() if k not in ("message", "advice", "passed")}
    return CheckOutcome("predictive", bool(summary["passed"]), str(summary["message"]),
                        str(summary.get("advice", "")), details)


def sampler(diagnostics: dict[str, Any]) -> CheckOutcome:
    """One autocorrelation time and one effective sample size, and whether they suffice."""
    tau = float(diagnostics.get("autocorr_time_steps", math.nan))
    ess = float(diagnostics.get("effective_sample_size_total", math.nan))
    reliable = bool(diagnostics.get("autocorr_reliable", False))
    acc = float(diagnostics.get("acceptance_fraction", math.nan))
    details = {"autocorr_time_steps": tau, "effective_sample_size": ess,
               "autocorr_reliable": reliable, "acceptance_fraction": acc,
               "n_ensembles": diagnostics.get("n_runs"),
               "kept_steps": diagnostics.get("kept_steps")}
    text = (f"integrated autocorrelation time {tau:.3g} steps, effective sample size "
            f"{ess:.4g} (n_walkers x kept steps / tau, summed over "
            f"{diagnostics.get('n_runs', 1)} ensemble(s)), acceptance fraction {acc:.2f}")
    problems = list(diagnostics.get("warnings", []))
    if problems:
        return CheckOutcome("sampler", False, text + "; " + "; ".join(problems) + ".",
                            "raise PosteriorSettings.n_steps (the chains stop by themselves "
                            "once longer than 50 tau)", details)
    return CheckOutcome("sampler", True, text + ".", "", details)


def refinement(diagnostics: dict[str, Any], threshold_nats: float | None = None) -> CheckOutcome:
    """Did refinement bring the surrogate's stated error at posterior draws below its threshold?"""
    log = diagnostics.get("refinement") or []
    reason = str(diagnostics.get("refine_stop_reason", ""))
    err = log[-1].get("stated_error_90_nats") if log else None
    spent = diagnostics.get("forward_runs_by_use", {})
    details = {"stop_reason": reason, "stated_error_90_nats": err, "rounds": len(log),
               "threshold_nats": threshold_nats, "forward_runs_by_use": spent,
               "forward_budget": diagnostics.get("forward_budget")}
    what = diagnostics.get("target", "surrogate")
    if reason.startswith("stated error"):
        return CheckOutcome("refinement", True, f"the {what}'s {reason}.", "", details)
    return CheckOutcome(
        "refinement", False,
        f"refinement stopped before the {what} was accurate enough where the posterior mass "
        f"sits: {reason}. The posterior carries the {what}'s uncertainty (wider than the "
        "data alone allow).",
        "raise [posterior] forward_budget (and n_refine_rounds) so that refinement reaches "
        "its threshold", details)


def _interval(x: np.ndarray, level: float) -> tuple[float, float]:
    lo, hi = np.quantile(x, [(1 - level) / 2, (1 + level) / 2])
    return float(lo), float(hi)


def best_in_intervals(points: dict[str, dict[str, float]], samples: pd.DataFrame,
                      bounds: np.ndarray | None = None,
                      level: float = INTERVAL_LEVEL) -> CheckOutcome:
    """Every reported best fit (best trial, MAP) lies inside the posterior's central intervals.

    Parameters
    ----------
    points : dict of label to (name to value)
        The reported best fits, e.g. ``{"best trial": {...}, "MAP": {...}}``.
    samples : DataFrame
        The posterior sample, one column per name.
    bounds : ndarray of shape (d, 2), optional
        The bounds, to say when an outside coefficient sits on one.
    level : float, default=0.95
    """
    names = list(samples.columns)
    intervals = {n: _interval(samples[n].to_numpy(dtype=float), level) for n in names}
    outside = []
    on_bound = []
    for label, coeffs in points.items():
        for j, n in enumerate(names):
            if n not in coeffs:
                continue
            v = float(coeffs[n])
            lo, hi = intervals[n]
            if not lo <= v <= hi:
                outside.append(f"{label} {n} = {v:.5g} outside [{lo:.5g}, {hi:.5g}]")
                if bounds is not None:
                    b_lo, b_hi = bounds[j]
                    tol = BOUND_FRACTION * (b_hi - b_lo)
                    if v <= b_lo + tol:
                        on_bound.append(f"{n} sits on its lower bound {b_lo:.5g}: widen it")
                    elif v >= b_hi - tol:
                        on_bound.append(f"{n} sits on its upper bound {b_hi:.5g}: widen it")
    details = {"level": level, "intervals": {n: list(v) for n, v in intervals.items()},
               "outside": outside}
    if outside:
        advice = ("the posterior does not centre on the best fit: the surrogate or emulator is "
                  "wrong there, or the posterior has several modes; give the posterior stage "
                  "more forward runs and compare the modes")
        if on_bound:
            advice = "; ".join(sorted(set(on_bound))) + "; " + advice
        return CheckOutcome("best_in_intervals", False,
                            f"the reported best fit lies outside its own {level:.0%} intervals: "
                            + "; ".join(outside) + ".", advice, details)
    return CheckOutcome("best_in_intervals", True,
                        f"{' and '.join(points)} lie inside the posterior's {level:.0%} intervals "
                        "of every coefficient.", "", details)


def map_vs_best(map_coefficients: dict[str, float], map_log_likelihood: float, map_source: str,
                best_coefficients: dict[str, float], best_log_likelihood: float,
                samples: pd.DataFrame) -> CheckOutcome:
    """Do the MAP and the best search trial agree? If not, say why.

    They agree when the best trial lies inside the posterior's 95 % credible
    region around the MAP, ``2 |l_MAP - l_best| <= chi2.ppf(0.95, d)`` (the
    Laplace approximation, as in :mod:`~profshape.posterior.check`: the best
    trial is then a plausible posterior draw), and within 2 posterior standard
    deviations in every coefficient. A MAP much
    better than the best trial means the search had not converged (a failure:
    the search's best is not the best fit); an equally good MAP far from it
    means a flat or ridged likelihood (explained, not a failure).
    """
    names = list(samples.columns)
    d = len(names)
    sd = samples.std(ddof=1).to_numpy(dtype=float)
    diff = np.array([map_coefficients[n] - best_coefficients[n] for n in names])
    with np.errstate(divide="ignore", invalid="ignore"):
        dist = np.where(sd > 0, np.abs(diff) / sd, np.where(diff == 0, 0.0, np.inf))
    delta = float(map_log_likelihood - best_log_likelihood)
    limit = float(0.5 * stats.chi2.ppf(0.95, d))
    details = {"map_source": map_source, "delta_log_likelihood_nats": delta,
               "limit_nats": limit,
               "distance_in_posterior_sd": dict(zip(names, dist.tolist(), strict=True))}
    far = [n for n, x in zip(names, dist, strict=True) if x > 2.0]
    if map_source == "best_trial" or (abs(delta) <= limit and not far):
        return CheckOutcome("map_vs_best", True,
                            f"the MAP (from {map_source}) and the best trial agree "
                            f"(log-likelihood difference {delta:+.3g} nats, largest distance "
                            f"{float(np.max(dist)) if d else 0.0:.2g} posterior sd).", "", details)
    if delta > limit:
        return CheckOutcome(
            "map_vs_best", False,
            f"the MAP (from {map_source}, verified with a real forward run) is better than the "
            f"search's best trial by {delta:.3g} nats (limit {limit:.3g}): the search had not "
            "converged, so its best trial is not the best fit; the MAP is"
            + (f" (they differ most in {', '.join(far)})" if far else "") + ".",
            "resume the search with a larger budget (or start it from the MAP) and sample again",
            details)
    return CheckOutcome(
        "map_vs_best", True,
        f"the MAP (from {map_source}) and the best trial are equally good (log-likelihood "
        f"difference {delta:+.3g} nats) but differ by more than 2 posterior sd in "
        f"{', '.join(far)}: the likelihood is flat or ridged there, and both lie on the ridge.",
        "read the pair plot: the data constrain a combination of these coefficients, not each",
        details)


# ------------------------------------------------------------ all together
def _best_row(frames: list[tuple[pd.DataFrame | None, str]]) -> tuple[pd.Series | None, str]:
    best: tuple[pd.Series, float, str] | None = None
    for frame, label in frames:
        if frame is None or not len(frame) or "reduced_chi2" not in frame:
            continue
        ok = frame[frame["status"] == "ok"]
        chi2 = pd.to_numeric(ok.get("chi2", ok["reduced_chi2"]), errors="coerce")
        chi2 = chi2[np.isfinite(chi2)]
        if not len(chi2):
            continue
        i = chi2.idxmin()
        if best is None or float(chi2[i]) < float(best[1]):
            best = (ok.loc[i], float(chi2[i]), label)
    if best is None:
        return None, ""
    row, _, label = best
    trial = row.get("trial")
    suffix = f" {int(trial)}" if trial is not None and bool(pd.notna(trial)) else ""
    return row, f"the best fit ({label}{suffix})"


def best_fit(trials: pd.DataFrame, posterior: Any = None,
             names: Any = None) -> dict[str, Any] | None:
    """The best fit over every real run (search trials and the posterior's runs).

    Returns ``coefficients`` (by name), ``chi2``, ``reduced_chi2``, ``source``
    (``"trial"`` or ``"posterior run"``) and ``trial`` (or None), or None
    without a successful run.
    """
    frames: list[tuple[pd.DataFrame | None, str]] = [(trials, "trial")]
    if posterior is not None and len(getattr(posterior, "forward_runs", [])):
        frames.append((posterior.forward_runs, "posterior run"))
    row, _ = _best_row(frames)
    if row is None:
        return None
    names = list(names if names is not None else posterior.names)
    trial = row.get("trial")
    trial_number = int(trial) if trial is not None and bool(pd.notna(trial)) else None
    is_trial = trial_number is not None
    return {"coefficients": {n: float(row[n]) for n in names},
            "chi2": float(row["chi2"]) if "chi2" in row and pd.notna(row["chi2"]) else None,
            "reduced_chi2": float(row["reduced_chi2"]),
            "source": "trial" if is_trial else f"posterior run ({row.get('source', '')})",
            "trial": trial_number}


def run_checks(problem: PosteriorProblem, trials: pd.DataFrame, posterior: Any = None) -> list[CheckOutcome]:
    """All checks of a calibration (no forward run: stored predictions are used).

    Parameters
    ----------
    problem : CalibrationProblem
    trials : DataFrame
        The search's trial log.
    posterior : PosteriorResult, optional
        Adds the predictive, sampler, interval and MAP checks.
    """
    frames: list[tuple[pd.DataFrame | None, str]] = [(trials, "trial")]
    if posterior is not None and len(getattr(posterior, "forward_runs", [])):
        frames.append((posterior.forward_runs, "posterior run"))
    row, where = _best_row(frames)
    out: list[CheckOutcome] = []
    if row is None:
        out.append(CheckOutcome("goodness_of_fit", False, "no successful trial to judge",
                                "read the failure reasons in the trial log"))
    else:
        n = int(problem.dataset.n_data)
        dof = max(n - int(problem.n_fitted), 1)
        chi2 = float(row["chi2"]) if "chi2" in row and pd.notna(row["chi2"]) \
            else float(row["reduced_chi2"]) * dof
        out.append(goodness_of_fit(chi2, dof, best_fit_residuals(problem, row), where=where))
    if posterior is None:
        return out
    out.append(predictive(posterior.check))
    if posterior.diagnostics.get("refinement") is not None and \
            posterior.diagnostics.get("method", "surrogate") == "surrogate":
        out.append(refinement(posterior.diagnostics,
                              posterior.settings.get("refine_threshold_nats")))
    out.append(sampler(posterior.diagnostics))
    ok = trials[trials["status"] == "ok"]
    if len(ok):
        i_best = pd.to_numeric(ok["log_likelihood"], errors="coerce").idxmax()
        best = ok.loc[i_best]  # type: ignore[call-overload]  # pandas-stubs: a label is Hashable
        best_c = {n: float(best[n]) for n in posterior.names}
        points = {"MAP": posterior.map_coefficients}
        if row is not None:  # the reported best fit: the best real run of all
            points = {where.replace("the best fit", "best fit"):
                      {n: float(row[n]) for n in posterior.names}, **points}
        out.append(best_in_intervals(points, posterior.samples,
                                     np.asarray(problem.bounds, dtype=float)))
        out.append(map_vs_best(posterior.map_coefficients, posterior.map_log_likelihood,
                               posterior.map_source, best_c, float(best["log_likelihood"]),
                               posterior.samples))
    return out


def checks_markdown(checks: list[dict[str, Any]]) -> list[str]:
    """The ``## Checks`` section of a report (from :meth:`CheckOutcome.to_dict` records)."""
    if not checks:
        return []
    failed = [c for c in checks if not c["passed"]]
    head = (f"**{len(failed)} of {len(checks)} checks FAILED: do not trust the best fit or the "
            "bands until they pass.**" if failed else f"All {len(checks)} checks passed.")
    lines = ["## Checks", "", head, "", "| check | verdict | finding | what to do |",
             "|---|---|---|---|"]
    for c in checks:
        verdict = "passed" if c["passed"] else "**FAILED**"
        msg = str(c["message"]).replace("|", "/")
        advice = str(c.get("advice") or "").replace("|", "/") if not c["passed"] else ""
        lines.append(f"| {c['name']} | {verdict} | {msg} | {advice} |")
    return [*lines, ""]


def terminal_lines(checks: list[dict[str, Any]]) -> list[str]:
    """One line per check for the terminal; failures in full, with what to do."""
    out = []
    for c in checks or []:
        if c["passed"]:
            out.append(f"check {c['name']}: passed")
        else:
            text = f"check {c['name']}: FAILED - {c['message']}"
            if c.get("advice"):
                text += f" What to do: {c['advice']}"
            out.append(text)
    return out
