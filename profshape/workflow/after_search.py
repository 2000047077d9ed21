"""After the search: everything that needs forward runs, saved in the output folder.

The search record, the posterior (sampling, refinement and check runs), its
bands, the predictions, the ``[reference]`` run and the checks. The report
(:mod:`profshape.workflow.report`) then renders these files without running
anything.
"""

from __future__ import annotations

import time
import warnings
from pathlib import Path
from typing import Any

import pandas as pd

from ..atomic_write import atomic_write_bytes, atomic_write_json, json_safe
from ..exceptions import ProfshapeWarning
from .build import Calibration
from .layout import (
    BANDS_DIR,
    BANDS_EMULATED_FILE,
    CHECKS_FILE,
    NOTES_FILE,
    POSTERIOR_DIR,
    POSTERIOR_FILE,
    PREDICTIONS_FILE,
    SEARCH_FILE,
    STAGE_FILE,
)
from .stages import StageProgress

__all__ = ["MIN_OK_TRIALS_FOR_POSTERIOR", "run_after_search", "stage_progress"]

#: Successful trials below which no posterior is sampled (at least d + 2 too).
MIN_OK_TRIALS_FOR_POSTERIOR = 5


def run_after_search(cal: Calibration, result: Any, out: Path, executor: Any = None,
                     skip_posterior: str | None = None) -> tuple[str | None, int]:
    """Search record, posterior, bands, predictions, reference run and checks, saved in ``out``.

    Parameters
    ----------
    cal : Calibration
    result : profshape.search.SearchResult
    out : Path
        The calibration's output folder.
    executor : Executor, optional
        Runs the posterior's forward runs in parallel.
    skip_posterior : str, optional
        Why no posterior is sampled (noted in the report), e.g. a flat objective.

    Returns
    -------
    error : str or None
        Why the posterior could not be computed (None when it was, or was
        disabled or skipped on purpose).
    n_ok : int
        The successful trials of the log.

    A posterior that fails is noted (``notes.json``) and does not raise, so
    that the summary and report of the search are written all the same.
    """
    out = Path(out)
    search_info = {
        "stop_reason": result.stop_reason,
        "best_trial": result.best_trial,
        "best_reduced_chi2": result.best_reduced_chi2,
        "best_coefficients": result.best_coefficients,
        "n_trials": result.n_trials,
        "n_failed": result.n_failed,
        "stop_detail": getattr(result, "stop_detail", ""),
        "on_bounds": [h.to_dict() for h in getattr(result, "on_bounds", ())],
        "finished": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
    }
    atomic_write_json(out / SEARCH_FILE, json_safe(search_info))
    post_cfg = cal.config.section("posterior")
    notes: list[str] = []
    n_ok = int((result.trials["status"] == "ok").sum()) if len(result.trials) else 0
    need = max(MIN_OK_TRIALS_FOR_POSTERIOR, len(cal.problem.names) + 2)  # the sampler's d + 2
    error = None
    if skip_posterior and post_cfg["enabled"]:
        notes.append(f"posterior skipped: {skip_posterior}")
    elif post_cfg["enabled"] and n_ok >= need:
        try:
            _posterior_products(cal, result, out, executor, notes)
        except Exception as exc:  # keep the search's summary and report whatever happens
            error = f"{type(exc).__name__}: {exc}"
            notes.append(f"posterior failed: {error}")
    elif post_cfg["enabled"]:
        error = (f"only {n_ok} successful trials, at least d + 2 = {need} needed; "
                 "raise the search budget and resume")
        notes.append(f"posterior skipped: {error}")
    if cal.config.section("reference").get("file"):
        from ..reference import run_reference

        with stage_progress(cal, result).executor("reference", len(cal.problem.dataset.labels),
                                                   executor,
                                                   "the [reference] profile, once") as ex:
            run_reference(cal, out, ex)
    _write_checks(cal, result.trials, out)
    if notes:
        atomic_write_json(out / NOTES_FILE, notes)
    return error, n_ok


def _write_checks(cal: Calibration, trials: pd.DataFrame, out: Path) -> None:
    """Run the checks (no forward run) and save them as ``checks.json``."""
    from ..posterior import PosteriorResult
    from ..posterior.verdicts import run_checks

    posterior = None
    if (out / POSTERIOR_DIR / POSTERIOR_FILE).exists():
        posterior = PosteriorResult.load(out / POSTERIOR_DIR)
    checks = [c.to_dict() for c in run_checks(cal.problem, trials, posterior)]
    atomic_write_json(out / CHECKS_FILE, json_safe(checks))


def _posterior_products(cal: Calibration, result: Any, out: Path, executor: Any, notes: list[str]) -> None:
    from ..posterior import PosteriorSettings, posterior_bands, predict_scalars, sample_posterior

    post_cfg = cal.config.section("posterior")
    seed = post_cfg["seed"] if post_cfg["seed"] is not None else cal.search_settings.seed
    keys = ("n_walkers", "n_steps", "burn_in", "thin", "n_gp_draws", "n_refine_rounds",
            "n_refine_draws", "n_check_draws", "forward_budget", "refine_threshold_nats")
    kwargs = {k: post_cfg[k] for k in keys if post_cfg[k] is not None}
    levels = tuple(float(v) for v in post_cfg["band_levels"])
    settings = PosteriorSettings(seed=seed, band_levels=levels, **kwargs)
    stages = stage_progress(cal, result)
    n_draws = int(post_cfg["n_band_draws"])
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ProfshapeWarning)
        n_post = settings.forward_budget  # the posterior stage's own forward-run budget
        with stages.executor("posterior", n_post, executor,
                             "sampling on the surrogate, refinement and check runs") as ex:
            posterior = sample_posterior(cal.problem, result.trials, settings, executor=ex)
        posterior.save(out / POSTERIOR_DIR)
        with stages.executor("bands", n_draws + 1, executor, "posterior draws") as ex:
            bands = posterior_bands(cal.problem, posterior, levels=levels, n_draws=n_draws,
                                    executor=ex, seed=seed, reuse_runs=True)
        bands.save(out / BANDS_DIR)
        _save_stage(cal, posterior, bands, levels, seed, out)
        tables = [bands.scalars.assign(in_data=True, extrapolation=False, extrapolation_reason="")]
        if cal.prediction_points:
            with stages.executor("predictions",
                                 (max(n_draws, 1) + 1) * len(cal.prediction_points),
                                 executor, "posterior draws at the prediction points") as ex:
                tables.append(predict_scalars(cal.problem, posterior, cal.prediction_points,
                                              n_draws=max(n_draws, 1), levels=levels,
                                              executor=ex, seed=seed))
        predictions = pd.concat(tables, ignore_index=True)
        atomic_write_bytes(out / PREDICTIONS_FILE,
                           lambda tmp: predictions.to_csv(tmp, index=False))
    notes.extend(f"{type(w.message).__name__}: {w.message}" for w in caught
                 if issubclass(w.category, ProfshapeWarning))


def stage_progress(cal: Calibration, result: Any) -> StageProgress:
    """The stage lines and bars of a calibration's stages after its search."""
    settings = getattr(cal, "search_settings", None)
    return StageProgress(result.trials, getattr(settings, "workers", 1),
                         bool(getattr(settings, "progress", False)))


def _save_stage(cal: Calibration, posterior: Any, bands: Any, levels: tuple[float, ...], seed: Any,
                out: Path) -> None:
    """Emulated bands and what the posterior stage spent (``posterior/stage.json``)."""
    from ..posterior.bands import emulated_bands

    emulated = emulated_bands(posterior, levels, seed=seed)
    if len(emulated):
        atomic_write_bytes(out / BANDS_DIR / BANDS_EMULATED_FILE,
                           lambda tmp: emulated.to_parquet(tmp, index=False))
    n_pred = len(cal.prediction_points) * (max(int(cal.config.section("posterior")["n_band_draws"]),
                                               1) + 1)
    spent = dict(posterior.diagnostics.get("forward_runs_by_use", {}))
    spent["bands"] = int(bands.extra.get("n_new_runs", 0))
    spent["predictions"] = n_pred
    stage = {"forward_runs": {**spent, "total": sum(spent.values())},
             "forward_budget": posterior.diagnostics.get("forward_budget"),
             "emulated_bands": None if not len(emulated) else {
                 "file": f"{BANDS_DIR}/{BANDS_EMULATED_FILE}",
                 "n_draws": emulated.attrs.get("n_draws"),
                 "stable": emulated.attrs.get("stable"),
                 "n_real_runs_compared": int(emulated["n_real"].iloc[0]),
                 **{f"real_inside_{lev:g}_mean": float(emulated[f"real_inside_{lev:g}"].mean())
                    for lev in levels}}}
    atomic_write_json(out / POSTERIOR_DIR / STAGE_FILE, json_safe(stage))
