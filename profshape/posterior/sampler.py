"""Ensemble MCMC on the unit cube with emcee, and its convergence diagnostics.

The sampler is emcee's affine-invariant ensemble sampler (Goodman and Weare
2010, Comm. Appl. Math. Comput. Sci. 5:65; Foreman-Mackey et al. 2013, PASP
125:306) with its default stretch move. Diagnostics follow the emcee
documentation: the integrated autocorrelation time per coordinate
(``get_autocorr_time``), the effective sample size ``n_walkers * n_kept / tau``,
and the mean acceptance fraction.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..exceptions import ConvergenceWarning, InputDataError

__all__ = ["EnsembleRun", "combine_diagnostics", "run_ensemble"]

#: emcee's documentation recommends chains longer than 50 autocorrelation times.
AUTOCORR_LENGTH_FACTOR = 50.0
#: Acceptance fractions outside this range suggest a poorly mixing ensemble
#: (common practice, no source; Foreman-Mackey et al. 2013 suggest 0.2-0.5).
ACCEPTANCE_RANGE = (0.1, 0.8)


@dataclass
class EnsembleRun:
    """The kept part of one ensemble-sampler run.

    Attributes
    ----------
    samples : ndarray of shape (n_kept * n_walkers, d)
        Unit-cube samples after burn-in and thinning.
    log_prob : ndarray of shape (n_kept * n_walkers,)
        Log-density of each sample (as given by the target function).
    diagnostics : dict
        ``acceptance_fraction`` (mean), ``acceptance_fraction_min``,
        ``autocorr_time`` (list per coordinate, steps), ``autocorr_reliable``
        (the chain is longer than 50 autocorrelation times),
        ``effective_sample_size`` (list per coordinate), ``n_walkers``,
        ``n_steps``, ``burn_in``, ``thin``, ``n_samples``.
    """

    samples: np.ndarray
    log_prob: np.ndarray
    diagnostics: dict[str, Any] = field(default_factory=dict)


#: Stop once the tau estimate changes by less than this fraction between checks, as in
#: emcee's tutorial on monitoring progress (from memory; that tutorial also asks for
#: 100 tau, we use emcee's own reliability threshold of 50 tau, get_autocorr_time's tol).
AUTOCORR_RTOL = 0.01


def run_ensemble(
    log_prob: Callable[[np.ndarray], np.ndarray],
    initial: np.ndarray,
    *,
    n_steps: int,
    burn_in: int,
    thin: int = 1,
    seed: int | None = None,
    stop_on_autocorr: bool = False,
    check_every: int = 100,
    min_steps: int = 0,
) -> EnsembleRun:
    """Run emcee on a vectorised log-density over the unit cube.

    Parameters
    ----------
    log_prob : callable
        ``log_prob(u)`` for ``u`` of shape (n, d) returns shape (n,), ``-inf``
        where the density is zero. Points outside [0, 1]^d are rejected before
        it is called.
    initial : ndarray of shape (n_walkers, d)
        Walker starts, each with a finite log-density.
    n_steps, burn_in, thin : int
        Steps per walker, leading steps dropped, keep every ``thin``-th step.
    seed : int or None
        Seed of the sampler's random state.
    stop_on_autocorr : bool, default=False
        Stop before ``n_steps`` (then the most steps) once the kept chain is
        longer than 50 integrated autocorrelation times (emcee's reliability
        threshold) and the estimate of tau changed by less than 1 % since the
        previous check (as in emcee's tutorial on monitoring progress; from memory).
    check_every : int, default=100
        Steps between two autocorrelation checks.
    min_steps : int, default=0
        Never stop before this many steps.

    Returns
    -------
    EnsembleRun

    Raises
    ------
    InputDataError
        Too few walkers for the dimension, or a start with zero density.
    """
    import emcee

    p0 = np.array(initial, dtype=float)
    n_walkers, d = p0.shape
    if n_walkers < 2 * d or n_walkers % 2:
        raise InputDataError(
            f"sampler: n_walkers must be even and >= 2 * d = {2 * d}; got {n_walkers}. "
            "Raise PosteriorSettings.n_walkers."
        )

    def bounded(u: np.ndarray) -> np.ndarray:
        u = np.atleast_2d(u)
        out = np.full(u.shape[0], -np.inf)
        inside = np.all((u >= 0.0) & (u <= 1.0), axis=1)
        if inside.any():
            vals = np.asarray(log_prob(u[inside]), dtype=float).reshape(-1)
            out[inside] = np.where(np.isnan(vals), -np.inf, vals)
        return out

    start_lp = bounded(p0)
    if not np.all(np.isfinite(start_lp)):
        bad = int(np.flatnonzero(~np.isfinite(start_lp))[0])
        raise InputDataError(
            f"sampler: walker start {bad} at u = {p0[bad].tolist()} has zero posterior density; "
            "start walkers inside the support."
        )
    sampler = emcee.EnsembleSampler(n_walkers, d, bounded, vectorize=True)
    sampler.random_state = np.random.RandomState(seed).get_state()
    if stop_on_autocorr:
        import emcee

        old_tau = None
        for _ in sampler.sample(p0, iterations=int(n_steps), progress=False):
            it = sampler.iteration
            if it % int(check_every) or it <= burn_in + 1 or it < min_steps:
                continue
            kept = sampler.get_chain(discard=int(burn_in))
            tau = np.asarray(emcee.autocorr.integrated_time(kept, tol=0, quiet=True), float)
            long_enough = np.all(kept.shape[0] > AUTOCORR_LENGTH_FACTOR * tau)
            stable = old_tau is not None and np.all(np.abs(old_tau - tau) < AUTOCORR_RTOL * tau)
            old_tau = tau
            if long_enough and stable:
                break
    else:
        sampler.run_mcmc(p0, int(n_steps), progress=False)
    n_run = int(sampler.iteration)
    chain = sampler.get_chain(discard=int(burn_in), thin=int(thin))
    lp = sampler.get_log_prob(discard=int(burn_in), thin=int(thin))
    diagnostics = _diagnostics(sampler, n_run, burn_in, thin)
    diagnostics["stopped_on_autocorr"] = bool(stop_on_autocorr and n_run < int(n_steps))
    return EnsembleRun(samples=chain.reshape(-1, d), log_prob=lp.reshape(-1),
                       diagnostics=diagnostics)


def _diagnostics(sampler: Any, n_steps: int, burn_in: int, thin: int) -> dict[str, Any]:
    chain = sampler.get_chain(discard=int(burn_in))  # (n_kept, n_walkers, d), unthinned
    n_kept, n_walkers, d = chain.shape
    tau = np.full(d, np.nan)
    reliable = False
    if n_kept >= 2:
        import emcee

        tau = np.asarray(emcee.autocorr.integrated_time(chain, tol=0, quiet=True), dtype=float)
        reliable = bool(np.all(n_kept > AUTOCORR_LENGTH_FACTOR * tau))
    tau = np.maximum(np.nan_to_num(tau, nan=float(max(n_kept, 1))), 1.0)
    ess = n_kept * n_walkers / tau
    acc = np.asarray(sampler.acceptance_fraction, dtype=float)
    return {
        "acceptance_fraction": float(np.mean(acc)),
        "acceptance_fraction_min": float(np.min(acc)),
        "autocorr_time": tau.tolist(),
        "autocorr_reliable": reliable,
        "effective_sample_size": ess.tolist(),
        "n_walkers": int(n_walkers),
        "n_steps": int(n_steps),
        "burn_in": int(burn_in),
        "thin": int(thin),
        "n_samples": int(len(range(burn_in, n_steps, thin)) * n_walkers),
        "kept_steps": int(n_kept),
    }


def combine_diagnostics(
    runs: Sequence[dict[str, Any]], names: Sequence[str], *, warn: bool = True
) -> dict[str, Any]:
    """Pool the diagnostics of several independent runs (GP realisations, starting basins).

    One autocorrelation time ``autocorr_time_steps``: the largest integrated
    autocorrelation time over coefficients and runs [steps]. One effective
    sample size ``effective_sample_size_total = sum over runs of n_walkers *
    kept_steps / autocorr_time_steps`` (the emcee documentation's ESS with the
    worst tau). Per-coefficient figures are kept in ``autocorr_time`` and
    ``effective_sample_size`` (dicts by name). Acceptance fractions are
    reported as the mean and the smallest. Emits a :class:`~profshape.exceptions.ConvergenceWarning` when a
    run is shorter than 50 autocorrelation times or its acceptance fraction
    lies outside ``ACCEPTANCE_RANGE``.
    """
    tau = np.array([r["autocorr_time"] for r in runs], dtype=float)
    ess = np.array([r["effective_sample_size"] for r in runs], dtype=float)
    acc = np.array([r["acceptance_fraction"] for r in runs], dtype=float)
    tau_max = float(np.max(tau))
    kept = [int(r.get("kept_steps", r["n_steps"] - r["burn_in"])) for r in runs]
    ess_total = float(sum(int(r["n_walkers"]) * k for r, k in zip(runs, kept, strict=True))
                      / tau_max)
    out: dict[str, Any] = {
        "autocorr_time_steps": tau_max,
        "effective_sample_size_total": ess_total,
        "kept_steps": kept,
        "n_runs": len(runs),
        "acceptance_fraction": float(acc.mean()),
        "acceptance_fraction_min": float(min(r["acceptance_fraction_min"] for r in runs)),
        "autocorr_time": dict(zip(names, tau.max(axis=0).tolist(), strict=True)),
        "autocorr_reliable": bool(all(r["autocorr_reliable"] for r in runs)),
        "effective_sample_size": dict(zip(names, ess.sum(axis=0).tolist(), strict=True)),
        "min_effective_sample_size": ess_total,
        "n_samples": int(sum(r["n_samples"] for r in runs)),
        "n_walkers": int(runs[0]["n_walkers"]),
        "n_steps": int(max(r["n_steps"] for r in runs)),
        "burn_in": int(runs[0]["burn_in"]),
        "thin": int(runs[0]["thin"]),
    }
    problems = []
    if not out["autocorr_reliable"]:
        worst = max(out["autocorr_time"], key=out["autocorr_time"].get)
        problems.append(
            f"the kept chain ({min(kept)} steps) is shorter than "
            f"{AUTOCORR_LENGTH_FACTOR:.0f} autocorrelation times (tau = "
            f"{out['autocorr_time'][worst]:.1f} steps for {worst!r}); raise n_steps"
        )
    lo, hi = ACCEPTANCE_RANGE
    if not lo <= out["acceptance_fraction"] <= hi:
        problems.append(
            f"mean acceptance fraction {out['acceptance_fraction']:.2f} lies outside "
            f"[{lo}, {hi}]"
        )
    out["warnings"] = problems
    if warn and problems:
        warnings.warn("posterior sampler: " + "; ".join(problems) + ".", ConvergenceWarning,
                      stacklevel=3)
    return out
