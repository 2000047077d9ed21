"""Posterior sampling of a calibration problem's coefficients.

How the surrogate's own uncertainty is accounted for
----------------------------------------------------
With ``method="surrogate"`` the forward model is replaced by a surrogate fitted
to the trials:

- ``surrogate_of="outputs"`` (default): the output emulator
  (:mod:`~profshape.posterior.emulated`); its predictive variance is added to
  the data variance in the likelihood (Kennedy and O'Hagan 2001; Higdon et al.
  2008), so the sampler's target is deterministic and honest about the
  emulator;
- ``surrogate_of="log_likelihood"``: a GP of the log-likelihood; the posterior
  is sampled on ``n_gp_draws`` GP realisations (pathwise conditioning, see
  :mod:`~profshape.posterior.surrogate`) and pooled.

Several modes: walker ensembles start in distinct basins of the target
(:mod:`~profshape.posterior.basins`) and are pooled with Laplace weights.

Refinement where the mass sits: each round a short scout run places draws; the
surrogate's stated error of the log-likelihood is measured there, and, until
its 90 % quantile is below ``refine_threshold_nats`` and the last real runs
agreed with it, ``n_refine_draws`` draws (half where the surrogate is least
sure) are run through the real model and the surrogate is refitted
(warm-started, capped). The stage never makes more than ``forward_budget``
forward runs and reports what it spent on what. The final chains stop on the
autocorrelation criterion (:func:`~profshape.posterior.sampler.run_ensemble`).

Finally ``n_check_draws`` fresh draws are run through the forward model and
compared with the surrogate (:mod:`~profshape.posterior.check`).

The prior is uniform on the unit cube, i.e. uniform within the bounds in the
coefficients' own (log-scaled) units, unless ``log_prior`` is given.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd

from .._threads import pinned_threads
from ..exceptions import InputDataError
from ._evaluate import DrawRun, evaluate_many, runs_to_frame
from .basins import find_basins, pool_by_basin
from .check import judge_check
from .protocol import PosteriorProblem
from .result import PosteriorResult
from .sampler import combine_diagnostics, run_ensemble
from .settings import PosteriorSettings
from .surrogate import LogLikelihoodSurrogate, fit_log_likelihood_surrogate

__all__ = ["ok_trials", "sample_posterior"]

LogPrior = Callable[[np.ndarray], np.ndarray]


def ok_trials(problem: PosteriorProblem, trials: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
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


def _prior_u(problem: PosteriorProblem, log_prior: LogPrior | None) -> Callable[[np.ndarray], np.ndarray]:
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


class _SurrogateTarget:
    """The log-likelihood GP as the sampler's target (GP realisations or its mean)."""

    kind = "surrogate"

    def __init__(self, settings: PosteriorSettings) -> None:
        self.settings = settings
        self.surrogate: LogLikelihoodSurrogate | None = None
        self.n_fits = 0

    def fit(self, u: np.ndarray, ll: np.ndarray) -> None:
        s = self.settings
        self.surrogate = fit_log_likelihood_surrogate(
            u, ll, floor_nats=s.log_likelihood_floor_nats, max_trials=s.max_gp_trials,
            seed=s.seed, warm_start=self.surrogate,
            max_iter=None if self.surrogate is None else _REFIT_MAX_ITER,
        )
        self.n_fits += 1

    def mean(self, u: np.ndarray) -> np.ndarray:
        assert self.surrogate is not None
        return self.surrogate.mean(u)

    def predict(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Mean and stated error [nats] of the log-likelihood of a new forward run."""
        assert self.surrogate is not None
        return self.surrogate.predict(u, include_noise=True)

    def add(self, u: np.ndarray, runs: list[DrawRun]) -> None:
        """New forward runs (the log-likelihoods reach :meth:`fit` with the training set)."""

    def targets(self, n: int, rng: np.random.Generator) -> tuple[list, list[int]]:
        assert self.surrogate is not None
        if self.settings.n_gp_draws == 0:
            return [self.surrogate.mean] * n, [-1] * n
        k = self.settings.n_gp_draws
        paths = self.surrogate.draw_realisations(k, self.settings.n_features,
                                                 seed=int(rng.integers(2**31)))
        return paths, list(range(k))


#: Steps after burn-in of the short scout runs that choose refinement points
#: (common practice, no source: enough to place draws, not to summarise them).
_SCOUT_STEPS = 200

#: Most L-BFGS iterations of a warm-started refit of the posterior GP (common
#: practice, no source: a refit after a few new points moves the
#: hyper-parameters little).
_REFIT_MAX_ITER = 60


def _sample_target(
    target: Any,
    lp_u: Callable[[np.ndarray], np.ndarray],
    settings: PosteriorSettings,
    basins: list[tuple[np.ndarray, float]],
    u_start_pool: np.ndarray,
    start_score: np.ndarray,
    rng: np.random.Generator,
    names: list[str],
) -> tuple[np.ndarray, np.ndarray, np.ndarray, dict[str, Any]]:
    """One ensemble per target function (GP realisation) or per basin, pooled by weight."""
    if target.kind == "surrogate" and settings.n_gp_draws:
        n_ens = settings.n_gp_draws  # one ensemble per GP realisation
    else:  # one deterministic target: one ensemble per distinct basin
        n_ens = max(1, min(settings.n_ensembles, len(basins)))
    functions, labels = target.targets(n_ens, rng)
    samples, logp, diags = [], [], []
    for e, f in enumerate(functions):
        def log_prob(u: np.ndarray, f: Callable[[np.ndarray], np.ndarray] = f) -> np.ndarray:
            prior = lp_u(u)
            out = np.full(u.shape[0], -np.inf)
            fin = np.isfinite(prior)
            if fin.any():
                out[fin] = f(u[fin]) + prior[fin]
            return out

        if basins:
            centre = basins[e % len(basins)][0]
            p0 = _starts_near(centre, u_start_pool, start_score, settings.n_walkers, rng,
                              log_prob)
        else:
            p0 = _starts(u_start_pool, start_score, settings.n_walkers, rng)
        run = run_ensemble(log_prob, p0, n_steps=settings.n_steps, burn_in=settings.burn_in,
                           thin=settings.thin, seed=int(rng.integers(2**31)),
                           stop_on_autocorr=settings.stop_on_autocorr)
        samples.append(run.samples)
        logp.append(run.log_prob)
        diags.append(run.diagnostics)
    diag = combine_diagnostics(diags, names, warn=False)
    index, _group, info = pool_by_basin(samples, logp, rng)
    diag["basins"] = info
    diag["n_basins_started"] = len(basins)
    u = np.vstack([samples[e][r] for e, r in index]) if len(index) else np.zeros((0, len(names)))
    lp = np.array([logp[e][r] for e, r in index])
    real = np.array([labels[e] for e, _ in index], dtype=int)
    return u, lp, real, diag


def _starts_near(centre: np.ndarray, pool_u: np.ndarray, pool_score: np.ndarray, n: int,
                 rng: np.random.Generator, log_prob: Callable[[np.ndarray], np.ndarray]
                 ) -> np.ndarray:
    """``n`` walker starts in a small ball around ``centre`` with finite density."""
    d = len(centre)
    # spread: the distance to the nearest pool point, so the ball stays in the basin
    dist = np.sqrt(np.sum((pool_u - centre) ** 2, axis=1))
    scale = float(np.clip(np.median(np.sort(dist)[: max(d + 1, 2)]), 1e-3, 0.05))
    p0 = np.clip(centre + 0.1 * scale * rng.standard_normal((n, d)), 1e-6, 1 - 1e-6)
    bad = ~np.isfinite(log_prob(p0))
    if bad.any():
        p0[bad] = _starts(pool_u, pool_score, int(bad.sum()), rng)
    return p0


def _stated_error(target: Any, u: np.ndarray) -> np.ndarray:
    return target.predict(u)[1]


def _check_dims(problem: PosteriorProblem, settings: PosteriorSettings) -> None:
    d = int(problem.dim)
    if settings.n_walkers < 2 * d:
        raise InputDataError(
            f"PosteriorSettings.n_walkers = {settings.n_walkers} is too few for {d} parameters; "
            f"the ensemble sampler needs at least 2 * d = {2 * d}. Raise n_walkers."
        )


@pinned_threads(1)
def sample_posterior(
    problem: PosteriorProblem,
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
    Runs torch with one intra-op thread (restored afterwards), as the search
    does, so a seed repeats its draws on the same machine.
    Forward runs made: at most ``forward_budget`` with the surrogate method (each
    runs every operating point; ``diagnostics["forward_runs_by_use"]`` says on
    what); ``n_walkers * (n_steps + 1)`` more with the exact method.
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
    budget = _Budget(settings)

    def evaluate(u: np.ndarray, source: str) -> list[DrawRun]:
        nonlocal n_forward
        coeffs = np.asarray(problem.from_unit(np.clip(u, 0.0, 1.0)), dtype=float)
        runs = evaluate_many(problem, coeffs, executor)
        n_forward += len(runs)
        budget.spend(source, len(runs))
        runs_frames.append(runs_to_frame(problem, coeffs, runs, source, settings.seed))
        return runs

    start_score = ll_all + lp_u(u_all)
    target: Any = None
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
        target = _make_target(problem, trials, settings)
        unit_samples, log_post, realisation, diag, map_u, map_ll, map_source, u_all, ll_all = \
            _refine_and_sample(target, problem, settings, u_all, ll_all, lp_u, rng, names,
                               evaluate, refine_log, budget)
        surrogate = getattr(target, "surrogate", None)
        if target.kind == "emulator":
            surrogate = target  # kept on the result for emulated bands
        diag["target"] = target.kind
        if target.kind == "emulator":
            diag["emulator"] = target.info()
        elif settings.surrogate_of == "outputs":
            diag.setdefault("warnings", []).append(
                "the trial log holds no usable predictions; sampled on the log-likelihood GP "
                "instead of the output emulator")
    if settings.method == "exact":
        map_u, map_ll, map_source = _map_exact(u_all, ll_all, lp_u, unit_samples, log_post,
                                               evaluate if budget.left() > budget.n_check else None)
    map_c = np.asarray(problem.from_unit(map_u), dtype=float)
    best_ll = float(np.max(ll_all))

    # ----- posterior predictive check
    check = None
    n_chk = min(settings.n_check_draws, len(unit_samples), budget.left())
    if n_chk > 0:
        pick = rng.choice(len(unit_samples), size=n_chk, replace=False)
        u_chk = unit_samples[pick]
        runs = evaluate(u_chk, "posterior_check")
        if target is not None:
            mean, std = target.predict(u_chk)
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
            "chi2": [r.chi2 if r.ok else math.nan for r in runs],
            "log_prior": lp_u(u_chk),
        })
        for j, name in enumerate(names):
            table[name] = coeffs[:, j]
        best_rchi = _best_reduced_chi2(trials, runs_frames)
        check = judge_check(
            table, best_log_likelihood=max(best_ll, map_ll), best_reduced_chi2=best_rchi,
            tolerance_nats=settings.check_tolerance_nats,
            max_disagree_fraction=settings.check_max_disagree_fraction,
            max_failed_fraction=settings.check_max_failed_fraction,
            n_parameters=d, best_log_prior=float(lp_u(map_u[None, :])[0]),
        )

    _warn_diagnostics(diag)
    diag["method"] = settings.method
    diag["surrogate_of"] = settings.surrogate_of
    diag["n_forward_runs"] = n_forward
    diag["n_gp_trials"] = len(ll_all)
    diag["refinement"] = refine_log
    diag["forward_budget"] = settings.forward_budget
    diag["forward_runs_by_use"] = dict(budget.spent)
    if settings.n_check_draws > 0 and n_chk < settings.n_check_draws:
        diag.setdefault("warnings", []).append(
            f"the predictive check ran {n_chk} of {settings.n_check_draws} draws "
            f"(forward_budget = {settings.forward_budget})")
    if surrogate is not None and getattr(surrogate, "kind", "") != "emulator":
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


def _make_target(problem: PosteriorProblem, trials: pd.DataFrame, settings: PosteriorSettings) -> Any:
    if settings.surrogate_of == "outputs":
        from .emulated import EmulatorTarget, emulator_training_set

        x, y = emulator_training_set(problem, trials)
        if len(x) >= problem.dim + 2 and y.shape[1] > 0:
            return EmulatorTarget(problem, x, y, seed=settings.seed or 0)
    return _SurrogateTarget(settings)


class _Budget:
    """Forward runs of the posterior stage: what is left and what was spent on what."""

    def __init__(self, settings: PosteriorSettings) -> None:
        self.total = int(settings.forward_budget)
        self.n_check = min(int(settings.n_check_draws), max(self.total - 1, 0))
        self.used = 0
        self.spent: dict[str, int] = {}

    def left(self) -> int:
        return max(self.total - self.used, 0)

    def for_refinement(self) -> int:
        """Runs refinement may still use (the check and the MAP keep theirs)."""
        return max(self.left() - self.n_check - 1, 0)

    def spend(self, source: str, n: int) -> None:
        self.used += int(n)
        key = source.rsplit("_", 1)[0] if source[-1:].isdigit() else source
        self.spent[key] = self.spent.get(key, 0) + int(n)


def _refine_and_sample(
    target: Any, problem: PosteriorProblem, settings: PosteriorSettings, u_all: np.ndarray,
    ll_all: np.ndarray, lp_u: Callable[[np.ndarray], np.ndarray], rng: np.random.Generator,
    names: list[str], evaluate: Callable[[np.ndarray, str], list[DrawRun]],
    refine_log: list[dict[str, Any]], budget: _Budget,
) -> tuple:
    """Fit, sample, and refine where the mass sits until the stated error is small enough.

    Each round samples the posterior on the target, then measures the target's
    stated error of the log-likelihood at posterior draws. Refinement stops
    when the 90 % quantile of that error is below ``refine_threshold_nats``
    and the last round's forward runs agreed with the target, or when the
    rounds or the budget run out. The MAP is the best of the basins' optima,
    verified with one forward run (or the best trial when that is better).
    """
    u_train, ll_train = u_all, ll_all
    agreed = False
    basins: list[tuple[np.ndarray, float]] = []
    stop_reason = "no refinement (n_refine_rounds = 0)"
    for round_ in range(settings.n_refine_rounds + 1):
        target.fit(u_train, ll_train)
        score = ll_train + lp_u(u_train)

        def mean_post(u: np.ndarray) -> np.ndarray:
            prior = lp_u(u)
            out = np.full(len(u), -np.inf)
            fin = np.isfinite(prior)
            if fin.any():
                out[fin] = target.mean(u[fin]) + prior[fin]
            return out

        basins = find_basins(mean_post, u_train, score, settings.n_ensembles,
                             extra_starts=[b[0] for b in basins])
        # a short scout run decides about refinement; the full run comes once, at the end
        scout_burn = min(settings.burn_in, _SCOUT_STEPS)
        scout = replace(settings, burn_in=scout_burn,
                        n_steps=min(settings.n_steps, scout_burn + _SCOUT_STEPS),
                        stop_on_autocorr=False)
        unit_samples, log_post, realisation, diag = _sample_target(
            target, lp_u, scout, basins, u_train, score, rng, names)
        probe = unit_samples[rng.choice(len(unit_samples), size=min(256, len(unit_samples)),
                                        replace=False)]
        err90 = float(np.quantile(_stated_error(target, probe), 0.9))
        entry: dict[str, Any] = {"round": round_, "stated_error_90_nats": err90,
                                 "n_basins": len(basins)}
        final = None
        if refine_log and agreed and err90 <= settings.refine_threshold_nats:
            final = (f"stated error of the log-likelihood at posterior draws "
                     f"{err90:.3g} nats <= {settings.refine_threshold_nats:g} and the "
                     "last forward runs agreed")
        n_run = min(settings.n_refine_draws, budget.for_refinement())
        if final is None and (round_ == settings.n_refine_rounds or n_run <= 0):
            final = ("refinement rounds used up" if n_run > 0 else
                     "posterior forward budget used up") + \
                f" (stated error {err90:.3g} nats, threshold {settings.refine_threshold_nats:g})"
        if final is not None:
            stop_reason = final
            refine_log.append(entry)
            unit_samples, log_post, realisation, diag = _sample_target(
                target, lp_u, settings, basins, u_train, score, rng, names)
            break
        # where the mass sits: half the runs where the target is least sure, half at random
        cand = unit_samples[rng.choice(len(unit_samples), size=min(8 * n_run,
                                       len(unit_samples)), replace=False)]
        err = _stated_error(target, cand)
        pick = np.argsort(-err)[: (n_run + 1) // 2]
        rest = np.setdiff1d(np.arange(len(cand)), pick)
        pick = np.concatenate([pick, rng.choice(rest, size=n_run - len(pick), replace=False)])
        u_new = cand[pick]
        mean, std = target.predict(u_new)
        runs = evaluate(u_new, f"posterior_refine_{round_ + 1}")
        good = np.array([r.ok for r in runs], dtype=bool)
        new_ll = np.array([r.log_likelihood for r in runs])[good]
        z = (new_ll - mean[good]) / np.sqrt(std[good] ** 2 + settings.check_tolerance_nats**2)
        disagree = float(np.mean(np.abs(z) > 3.0)) if len(z) else 1.0
        failed = float(1.0 - good.mean()) if len(good) else 1.0
        agreed = (disagree <= settings.check_max_disagree_fraction
                  and failed <= settings.check_max_failed_fraction)
        entry.update({"n_runs": len(runs), "n_ok": int(good.sum()),
                      "disagree_fraction": disagree, "failed_fraction": failed,
                      "max_abs_error_nats": float(np.max(np.abs(new_ll - mean[good])))
                      if len(new_ll) else math.nan})
        refine_log.append(entry)
        target.add(u_new, runs)
        u_train = np.vstack([u_train, u_new[good]])
        ll_train = np.concatenate([ll_train, new_ll])
        if not settings.refine_until_agreement:
            agreed = False
    diag["refine_stop_reason"] = stop_reason
    diag["n_target_fits"] = getattr(target, "n_fits", 0)
    # ----- MAP: the best basin optimum, verified with a real run
    lp_total = ll_train + lp_u(u_train)
    best_i = int(np.argmax(lp_total))
    map_u, map_ll, map_source = u_train[best_i], float(ll_train[best_i]), "best_trial"
    if basins and budget.left() > budget.n_check:
        cand_u = basins[0][0]
        cand_run = evaluate(cand_u[None, :], "posterior_map")[0]
        if cand_run.ok:
            cand_score = cand_run.log_likelihood + float(lp_u(cand_u[None, :])[0])
            if cand_score >= float(lp_total[best_i]):
                map_u, map_ll = cand_u, float(cand_run.log_likelihood)
                map_source = f"{target.kind}_optimum"
    return (unit_samples, log_post, realisation, diag, map_u, map_ll, map_source,
            u_train, ll_train)


def _map_exact(u_all: np.ndarray, ll_all: np.ndarray, lp_u: Callable[[np.ndarray], np.ndarray],
               unit_samples: np.ndarray, log_post: np.ndarray,
               evaluate: Callable[[np.ndarray, str], list[DrawRun]] | None) -> tuple:
    lp_total = ll_all + lp_u(u_all)
    best_i = int(np.argmax(lp_total))
    map_u, map_ll, source = u_all[best_i], float(ll_all[best_i]), "best_trial"
    if evaluate is None or not len(log_post):
        return map_u, map_ll, source
    cand_u = unit_samples[int(np.argmax(log_post))]
    run = evaluate(cand_u[None, :], "posterior_map")[0]
    if run.ok and run.log_likelihood + float(lp_u(cand_u[None, :])[0]) >= float(lp_total[best_i]):
        return cand_u, float(run.log_likelihood), "chain"
    return map_u, map_ll, source


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
