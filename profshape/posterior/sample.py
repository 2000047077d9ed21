"""Posterior sampling of a calibration problem's coefficients.

How the surrogate's own uncertainty is accounted for
----------------------------------------------------
With ``method="surrogate"`` the log-likelihood is replaced by a GP fitted to
the trials. Two mechanisms keep the GP's error out of the answer:

1. *Sampling GP realisations.* The posterior is sampled separately on
   ``n_gp_draws`` posterior function samples of the GP (pathwise conditioning,
   see :mod:`~profshape.posterior.surrogate`) and the chains are pooled. The
   pooled sample targets the posterior averaged over the surrogate's
   uncertainty, so where the GP is unsure the sample spreads accordingly.
2. *Refinement where the mass sits.* Each of up to ``n_refine_rounds``
   rounds runs ``n_refine_draws`` posterior draws through the real forward
   model, adds them to the GP's training set, refits and samples again: the
   surrogate becomes exact where the posterior mass is, and spurious modes in
   unexplored regions are visited and removed. With
   ``refine_until_agreement`` the rounds stop as soon as a round's runs agree
   with the surrogate (the same test as the predictive check).

Finally ``n_check_draws`` fresh draws are run through the forward model and
compared with the surrogate (:mod:`~profshape.posterior.check`).

The prior is uniform on the unit cube, i.e. uniform within the bounds in the
coefficients' own (log-scaled) units, unless ``log_prior`` is given.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize

from ..exceptions import InputDataError
from ._evaluate import DrawRun, evaluate_many, runs_to_frame
from .check import judge_check
from .result import PosteriorResult
from .sampler import combine_diagnostics, run_ensemble
from .settings import PosteriorSettings
from .surrogate import LogLikelihoodSurrogate, fit_log_likelihood_surrogate

__all__ = ["ok_trials", "sample_posterior"]

LogPrior = Callable[[np.ndarray], np.ndarray]


def ok_trials(problem: Any, trials: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Unit-cube coordinates and log-likelihoods of the usable trials.

    Uses the ``u__<name>`` columns when present, else the physical columns
    mapped with ``problem.to_unit``. Rows count when ``status == "ok"`` and the
    log-likelihood is finite.

    Raises
    ------
    InputDataError
        Missing columns (named in the message).
    """
    if not isinstance(trials, pd.DataFrame):
        raise InputDataError(f"trials must be a pandas DataFrame; got {type(trials).__name__}.")
    names = list(problem.names)
    missing = [c for c in ("status", "log_likelihood") if c not in trials.columns]
    if missing:
        raise InputDataError(
            f"trials: missing column(s) {missing}; pass the search's trial log "
            "(SearchResult.trials or the parquet file)."
        )
    ucols = [f"u__{n}" for n in names]
    ll = pd.to_numeric(trials["log_likelihood"], errors="coerce").to_numpy(dtype=float)
    keep = (trials["status"].astype(str) == "ok").to_numpy() & np.isfinite(ll)
    if all(c in trials.columns for c in ucols):
        u = trials.loc[keep, ucols].to_numpy(dtype=float)
    elif all(n in trials.columns for n in names):
        u = np.asarray(problem.to_unit(trials.loc[keep, names].to_numpy(dtype=float)))
    else:
        absent = [n for n in names if n not in trials.columns]
        raise InputDataError(
            f"trials: no coordinates for parameter(s) {absent}; the log must have columns "
            f"u__<name> or <name> for every name in {names}."
        )
    ll = ll[keep]
    inside = np.all(np.isfinite(u), axis=1)
    return np.clip(u[inside], 0.0, 1.0), ll[inside]


def _prior_u(problem: Any, log_prior: LogPrior | None) -> Callable[[np.ndarray], np.ndarray]:
    if log_prior is None:
        return lambda u: np.zeros(np.atleast_2d(u).shape[0])

    def lp(u: np.ndarray) -> np.ndarray:
        c = np.asarray(problem.from_unit(np.atleast_2d(u)), dtype=float)
        out = np.asarray(log_prior(c), dtype=float).reshape(-1)
        if out.shape[0] != c.shape[0]:
            raise InputDataError(
                f"log_prior must return one value per row; got shape {out.shape} for "
                f"{c.shape[0]} rows."
            )
        return np.where(np.isnan(out), -np.inf, out)

    return lp


def _starts(u_pool: np.ndarray, score: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    """``n`` walker starts near the best points of ``u_pool``, jittered, inside the cube."""
    order = np.argsort(-score)
    top = u_pool[order[: max(n, 1)]]
    picks = top[rng.integers(0, len(top), size=n)] if len(top) < n else top[:n]
    jitter = 0.01 * rng.standard_normal(picks.shape)
    return np.clip(picks + jitter, 1e-6, 1 - 1e-6)


def _sample_surrogate(
    surrogate: LogLikelihoodSurrogate,
    lp_u: Callable[[np.ndarray], np.ndarray],
    settings: PosteriorSettings,
    u_start_pool: np.ndarray,
    start_score: np.ndarray,
    rng: np.random.Generator,
    names: list[str],
) -> tuple[np.ndarray, np.ndarray, np.ndarray, dict[str, Any]]:
    targets: list[Callable[[np.ndarray], np.ndarray]]
    if settings.n_gp_draws == 0:
        targets = [surrogate.mean]
        labels = [-1]
    else:
        targets = surrogate.draw_realisations(
            settings.n_gp_draws, settings.n_features, seed=int(rng.integers(2**31))
        )
        labels = list(range(settings.n_gp_draws))
    samples, logp, real, diags = [], [], [], []
    for target, lab in zip(targets, labels, strict=True):
        def log_prob(u: np.ndarray, f=target) -> np.ndarray:
            prior = lp_u(u)
            out = np.full(u.shape[0], -np.inf)
            fin = np.isfinite(prior)
            if fin.any():
                out[fin] = f(u[fin]) + prior[fin]
            return out

        p0 = _starts(u_start_pool, start_score, settings.n_walkers, rng)
        run = run_ensemble(log_prob, p0, n_steps=settings.n_steps, burn_in=settings.burn_in,
                           thin=settings.thin, seed=int(rng.integers(2**31)))
        samples.append(run.samples)
        logp.append(run.log_prob)
        real.append(np.full(len(run.log_prob), lab))
        diags.append(run.diagnostics)
    diag = combine_diagnostics(diags, names, warn=False)
    return np.concatenate(samples), np.concatenate(logp), np.concatenate(real), diag


def _disagree_fraction(
    surrogate: LogLikelihoodSurrogate, u: np.ndarray, ll: np.ndarray,
    settings: PosteriorSettings,
) -> float:
    """Fraction of forward runs more than 3 sigma from the surrogate (as in the check)."""
    if len(ll) == 0:
        return 1.0
    mean, std = surrogate.predict(u, include_noise=True)
    z = (ll - mean) / np.sqrt(std**2 + settings.check_tolerance_nats**2)
    return float(np.mean(np.abs(z) > 3.0))


def _check_dims(problem: Any, settings: PosteriorSettings) -> None:
    d = int(problem.dim)
    if settings.n_walkers < 2 * d:
        raise InputDataError(
            f"PosteriorSettings.n_walkers = {settings.n_walkers} is too few for {d} parameters; "
            f"the ensemble sampler needs at least 2 * d = {2 * d}. Raise n_walkers."
        )


def sample_posterior(
    problem: Any,
    trials: pd.DataFrame,
    settings: PosteriorSettings | None = None,
    *,
    log_prior: LogPrior | None = None,
    executor: Any = None,
) -> PosteriorResult:
    """Sample the posterior over a problem's coefficients.

    Parameters
    ----------
    problem : CalibrationProblem
        The problem the trials were run on.
    trials : DataFrame
        The search's trial log (columns ``status``, ``log_likelihood`` and
        ``u__<name>`` or ``<name>`` per parameter).
    settings : PosteriorSettings, optional
    log_prior : callable, optional
        ``log_prior(coefficients)`` for an (n, d) array in physical units
        returns (n,) log densities; default uniform within the bounds.
        It is added to the uniform-in-bounds support.
    executor : Executor or dask Client, optional
        Runs refinement and check draws in parallel (one task per draw).

    Returns
    -------
    PosteriorResult

    Raises
    ------
    InputDataError
        Too few ok trials, missing columns, or settings that do not fit the problem.

    Warns
    -----
    ConvergenceWarning
        Chains shorter than 50 autocorrelation times or odd acceptance fractions.
    PosteriorCheckWarning
        The real forward model disagrees with the surrogate at posterior draws.

    Notes
    -----
    Forward runs made: at most ``n_refine_rounds * n_refine_draws + 1 + n_check_draws``
    with the surrogate method (each runs every operating point);
    ``n_walkers * (n_steps + 1) + n_check_draws`` with the exact method.
    """
    settings = settings or PosteriorSettings()
    if not isinstance(settings, PosteriorSettings):
        raise InputDataError(
            f"settings must be a PosteriorSettings; got {type(settings).__name__}."
        )
    _check_dims(problem, settings)
    names = list(problem.names)
    d = len(names)
    rng = np.random.default_rng(settings.seed)
    u_all, ll_all = ok_trials(problem, trials)
    if len(ll_all) < d + 2:
        raise InputDataError(
            f"trials: only {len(ll_all)} ok trial(s) with a finite log-likelihood; the posterior "
            f"needs at least d + 2 = {d + 2}. Run more search trials."
        )
    lp_u = _prior_u(problem, log_prior)
    runs_frames: list[pd.DataFrame] = []
    n_forward = 0
    surrogate: LogLikelihoodSurrogate | None = None
    refine_log: list[dict[str, Any]] = []

    def evaluate(u: np.ndarray, source: str) -> list[DrawRun]:
        nonlocal n_forward
        coeffs = np.asarray(problem.from_unit(np.clip(u, 0.0, 1.0)), dtype=float)
        runs = evaluate_many(problem, coeffs, executor)
        n_forward += len(runs)
        runs_frames.append(runs_to_frame(problem, coeffs, runs, source, settings.seed))
        return runs

    start_score = ll_all + lp_u(u_all)
    if settings.method == "exact":
        def exact_log_prob(u: np.ndarray) -> np.ndarray:
            nonlocal n_forward
            prior = lp_u(u)
            out = np.full(u.shape[0], -np.inf)
            for i in np.flatnonzero(np.isfinite(prior)):
                c = np.asarray(problem.from_unit(u[i]), dtype=float)
                run = evaluate_many(problem, c[None, :])[0]
                n_forward += 1
                if run.ok:
                    out[i] = run.log_likelihood + prior[i]
            return out

        p0 = _starts(u_all, start_score, settings.n_walkers, rng)
        run = run_ensemble(exact_log_prob, p0, n_steps=settings.n_steps,
                           burn_in=settings.burn_in, thin=settings.thin,
                           seed=int(rng.integers(2**31)))
        unit_samples, log_post = run.samples, run.log_prob
        realisation = np.full(len(log_post), -1)
        diag = combine_diagnostics([run.diagnostics], names, warn=False)
    else:
        u_train, ll_train = u_all, ll_all
        pool_u, pool_score = u_all, start_score
        for round_ in range(settings.n_refine_rounds + 1):
            surrogate = fit_log_likelihood_surrogate(
                u_train, ll_train, floor_nats=settings.log_likelihood_floor_nats,
                max_trials=settings.max_gp_trials, seed=settings.seed,
            )
            unit_samples, log_post, realisation, diag = _sample_surrogate(
                surrogate, lp_u, settings, pool_u, pool_score, rng, names
            )
            if round_ == settings.n_refine_rounds:
                break
            pick = rng.choice(len(unit_samples), size=settings.n_refine_draws, replace=False)
            runs = evaluate(unit_samples[pick], f"posterior_refine_{round_ + 1}")
            good = np.array([r.ok for r in runs], dtype=bool)
            new_ll = np.array([r.log_likelihood for r in runs])[good]
            disagree = _disagree_fraction(surrogate, unit_samples[pick][good], new_ll, settings)
            failed = float(1.0 - good.mean()) if len(good) else 1.0
            refine_log.append({"round": round_ + 1, "n_runs": len(runs), "n_ok": int(good.sum()),
                               "disagree_fraction": disagree, "failed_fraction": failed})
            u_train = np.vstack([u_train, unit_samples[pick][good]])
            ll_train = np.concatenate([ll_train, new_ll])
            # restart the next round's walkers from the best real points seen
            pool_u = u_train
            pool_score = ll_train + lp_u(u_train)
            if settings.refine_until_agreement and (
                disagree <= settings.check_max_disagree_fraction
                and failed <= settings.check_max_failed_fraction
            ):
                break  # the surrogate already matches the real model where the mass sits
        u_all = u_train
        ll_all = ll_train

    # ----- MAP: optimise the surrogate mean (or take the chain's best), verify with a real run
    lp_total_all = ll_all + lp_u(u_all)
    best_i = int(np.argmax(lp_total_all))
    best_u, best_ll, best_score = u_all[best_i], float(ll_all[best_i]), float(lp_total_all[best_i])
    map_u, map_ll, map_source = best_u, best_ll, "best_trial"
    if surrogate is not None:
        def neg(u: np.ndarray) -> float:
            v = float(surrogate.mean(u[None, :])[0] + lp_u(u[None, :])[0])
            return -v if math.isfinite(v) else 1e300

        starts = [u_all[i] for i in np.argsort(-lp_total_all)[:5]]
        starts.append(unit_samples[int(np.argmax(log_post))])
        cands = [optimize.minimize(neg, s, method="L-BFGS-B", bounds=[(0.0, 1.0)] * d)
                 for s in starts]
        cand_u = min(cands, key=lambda r: r.fun).x
        cand_source = "surrogate_optimum"
    else:
        cand_u = unit_samples[int(np.argmax(log_post))]
        cand_source = "chain"
    cand_run = evaluate(cand_u[None, :], "posterior_map")[0]
    if cand_run.ok:
        cand_score = cand_run.log_likelihood + float(lp_u(cand_u[None, :])[0])
        if cand_score >= best_score:
            map_u, map_ll, map_source = cand_u, cand_run.log_likelihood, cand_source
    map_c = np.asarray(problem.from_unit(map_u), dtype=float)

    # ----- posterior predictive check
    check = None
    if settings.n_check_draws > 0:
        n_chk = min(settings.n_check_draws, len(unit_samples))
        pick = rng.choice(len(unit_samples), size=n_chk, replace=False)
        u_chk = unit_samples[pick]
        runs = evaluate(u_chk, "posterior_check")
        if surrogate is not None:
            mean, std = surrogate.predict(u_chk, include_noise=True)
        else:
            mean = log_post[pick] - lp_u(u_chk)
            std = np.zeros(n_chk)
        coeffs = np.asarray(problem.from_unit(u_chk), dtype=float)
        table = pd.DataFrame({
            "draw": pick,
            "status": [r.status for r in runs],
            "reason": [r.reason for r in runs],
            "predicted_log_likelihood": mean,
            "predicted_std": std,
            "log_likelihood": [r.log_likelihood if r.ok else math.nan for r in runs],
            "reduced_chi2": [r.reduced_chi2 if r.ok else math.nan for r in runs],
        })
        for j, name in enumerate(names):
            table[name] = coeffs[:, j]
        best_rchi = _best_reduced_chi2(trials, runs_frames)
        check = judge_check(
            table, best_log_likelihood=max(best_ll, map_ll), best_reduced_chi2=best_rchi,
            tolerance_nats=settings.check_tolerance_nats,
            max_disagree_fraction=settings.check_max_disagree_fraction,
            max_failed_fraction=settings.check_max_failed_fraction,
        )

    _warn_diagnostics(diag)
    diag["method"] = settings.method
    diag["n_forward_runs"] = n_forward
    diag["n_gp_trials"] = len(ll_all)
    diag["refinement"] = refine_log
    if surrogate is not None:
        diag["surrogate"] = {
            "lengthscale_unit": surrogate.lengthscale.tolist(),
            "outputscale": surrogate.outputscale,
            "noise": surrogate.noise,
            "y_std_nats": surrogate.y_std,
            "floor_log_likelihood": surrogate.floor,
        }
    coeff_samples = np.asarray(problem.from_unit(unit_samples), dtype=float)
    settings_dict = settings.to_dict()
    settings_dict["_bounds"] = np.asarray(problem.bounds, dtype=float).tolist()
    return PosteriorResult(
        names=tuple(names),
        map_coefficients={n: float(v) for n, v in zip(names, map_c, strict=True)},
        map_log_likelihood=float(map_ll),
        map_source=map_source,
        samples=pd.DataFrame(coeff_samples, columns=names),
        unit_samples=unit_samples,
        log_posterior=log_post,
        realisation=realisation.astype(int),
        diagnostics=diag,
        check=check,
        forward_runs=pd.concat(runs_frames, ignore_index=True) if runs_frames else pd.DataFrame(),
        settings=settings_dict,
        surrogate=surrogate,
    )


def _warn_diagnostics(diag: dict[str, Any]) -> None:
    import warnings

    from ..exceptions import ConvergenceWarning

    if diag.get("warnings"):
        warnings.warn("posterior sampler: " + "; ".join(diag["warnings"]) + ".",
                      ConvergenceWarning, stacklevel=3)


def _best_reduced_chi2(trials: pd.DataFrame, frames: list[pd.DataFrame]) -> float:
    values = []
    for df in [trials, *frames]:
        if "reduced_chi2" in df.columns and "status" in df.columns:
            r = pd.to_numeric(df.loc[df["status"] == "ok", "reduced_chi2"], errors="coerce")
            r = r[np.isfinite(r)]
            if len(r):
                values.append(float(r.min()))
    return min(values) if values else math.nan
