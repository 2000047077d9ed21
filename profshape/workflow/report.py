"""After the search: posterior, bands, predictions, figures, summary and report.

:func:`finish` computes and saves everything that needs forward runs;
:func:`write_outputs` (and :func:`rebuild_report`, used by ``profshape
report``) builds the figures, ``summary.json`` and ``report.md`` from the
saved files alone, without running any forward model.
"""

from __future__ import annotations

import json
import math
import os
import time
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ._version import __version__
from .exceptions import InputDataError, ProfshapeWarning

__all__ = ["finish", "rebuild_report", "write_outputs"]

POSTERIOR_DIR = "posterior"
BANDS_DIR = "bands"
FIGURES_DIR = "figures"
PREDICTIONS_FILE = "predictions.csv"
SUMMARY_FILE = "summary.json"
REPORT_FILE = "report.md"
SEARCH_FILE = "search.json"
CHECKS_FILE = "checks.json"
STAGE_FILE = "stage.json"
MIN_OK_TRIALS_FOR_POSTERIOR = 5


def _atomic_text(path: Path, text: str) -> None:
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)


def _clean(obj: Any) -> Any:
    """JSON-safe: non-finite floats become None, numpy scalars plain numbers."""
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        return float(obj) if math.isfinite(float(obj)) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


def finish(cal: Any, result: Any, out: Path, executor: Any = None,
           skip_posterior: str | None = None) -> dict[str, Any]:
    """Posterior, bands and predictions after a search; then :func:`write_outputs`.

    Parameters
    ----------
    cal : profshape.pipeline.Calibration
    result : profshape.search.SearchResult
    out : Path
        The calibration's output folder.
    executor : Executor, optional
        Runs the posterior's forward runs in parallel.
    skip_posterior : str, optional
        Why no posterior is sampled (noted in the report), e.g. a flat objective.

    A posterior that fails is noted, and the summary and report of the search
    are written all the same; the summary then holds ``posterior_error``.
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
    _atomic_text(out / SEARCH_FILE, json.dumps(_clean(search_info), indent=2))
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
        from .reference import run_reference

        with _stage_progress(cal, result).executor("reference", len(cal.problem.dataset.labels),
                                                   executor,
                                                   "the [reference] profile, once") as ex:
            run_reference(cal, out, ex)
    _write_checks(cal, result.trials, out)
    if notes:
        _atomic_text(out / "notes.json", json.dumps(notes, indent=2))
    with _stage_progress(cal, result).timed("report", "drawing the figures, writing summary and report"):
        summary = write_outputs(out, cal=cal)
    if error is not None and n_ok:
        summary["posterior_error"] = error
    return summary


def _write_checks(cal: Any, trials: pd.DataFrame, out: Path) -> None:
    """Run the checks (no forward run) and save them as ``checks.json``."""
    from .posterior import PosteriorResult
    from .posterior.verdicts import run_checks

    posterior = None
    if (out / POSTERIOR_DIR / "posterior.json").exists():
        posterior = PosteriorResult.load(out / POSTERIOR_DIR)
    checks = [c.to_dict() for c in run_checks(cal.problem, trials, posterior)]
    _atomic_text(out / CHECKS_FILE, json.dumps(_clean(checks), indent=2))


def _posterior_products(cal: Any, result: Any, out: Path, executor: Any, notes: list[str]) -> None:
    from .posterior import PosteriorSettings, posterior_bands, predict_scalars, sample_posterior

    post_cfg = cal.config.section("posterior")
    seed = post_cfg["seed"] if post_cfg["seed"] is not None else cal.search_settings.seed
    keys = ("n_walkers", "n_steps", "burn_in", "thin", "n_gp_draws", "n_refine_rounds",
            "n_refine_draws", "n_check_draws", "forward_budget", "refine_threshold_nats")
    kwargs = {k: post_cfg[k] for k in keys if post_cfg[k] is not None}
    levels = tuple(float(v) for v in post_cfg["band_levels"])
    settings = PosteriorSettings(seed=seed, band_levels=levels, **kwargs)
    stages = _stage_progress(cal, result)
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
        predictions.to_csv(out / PREDICTIONS_FILE, index=False)
    notes.extend(f"{type(w.message).__name__}: {w.message}" for w in caught
                 if issubclass(w.category, ProfshapeWarning))


def _stage_progress(cal: Any, result: Any) -> Any:
    from .stages import StageProgress

    settings = getattr(cal, "search_settings", None)
    return StageProgress(result.trials, getattr(settings, "workers", 1),
                         bool(getattr(settings, "progress", False)))


def _save_stage(cal: Any, posterior: Any, bands: Any, levels: tuple[float, ...], seed: Any,
                out: Path) -> None:
    """Emulated bands and what the posterior stage spent (``posterior/stage.json``)."""
    from .posterior.bands import emulated_bands

    emulated = emulated_bands(posterior, levels, seed=seed)
    if len(emulated):
        emulated.to_parquet(out / BANDS_DIR / "bands_emulated.parquet", index=False)
    n_pred = len(cal.prediction_points) * (max(int(cal.config.section("posterior")["n_band_draws"]),
                                               1) + 1)
    spent = dict(posterior.diagnostics.get("forward_runs_by_use", {}))
    spent["bands"] = int(bands.extra.get("n_new_runs", 0))
    spent["predictions"] = n_pred
    stage = {"forward_runs": {**spent, "total": sum(spent.values())},
             "forward_budget": posterior.diagnostics.get("forward_budget"),
             "emulated_bands": None if not len(emulated) else {
                 "file": f"{BANDS_DIR}/bands_emulated.parquet",
                 "n_draws": emulated.attrs.get("n_draws"),
                 "stable": emulated.attrs.get("stable"),
                 "n_real_runs_compared": int(emulated["n_real"].iloc[0]),
                 **{f"real_inside_{lev:g}_mean": float(emulated[f"real_inside_{lev:g}"].mean())
                    for lev in levels}}}
    _atomic_text(out / POSTERIOR_DIR / STAGE_FILE, json.dumps(_clean(stage), indent=2))


# ------------------------------------------------------------------ outputs
def _load_optional(out: Path) -> tuple[Any, Any, pd.DataFrame | None]:
    from .posterior import PosteriorBands, PosteriorResult

    posterior = bands = predictions = None
    if (out / POSTERIOR_DIR / "posterior.json").exists():
        posterior = PosteriorResult.load(out / POSTERIOR_DIR)
    if (out / BANDS_DIR / "bands_profile.parquet").exists():
        bands = PosteriorBands.load(out / BANDS_DIR)
    if (out / PREDICTIONS_FILE).exists():
        predictions = pd.read_csv(out / PREDICTIONS_FILE, keep_default_na=False,
                                  na_values=[""])
    return posterior, bands, predictions


def _best_from_log(trials: pd.DataFrame, names: tuple[str, ...]) -> tuple[dict[str, float] | None, float,
                                                                          int | None]:
    ok = trials[trials["status"] == "ok"]
    if ok.empty:
        return None, math.inf, None
    row = ok.loc[ok["reduced_chi2"].idxmin()]
    return ({n: float(row[n]) for n in names}, float(row["reduced_chi2"]), int(row["trial"]))


def write_outputs(out: str | Path, cal: Any = None) -> dict[str, Any]:
    """Figures, ``summary.json`` and ``report.md`` from the files in ``out``.

    Runs no forward model. ``cal`` (a Calibration) may be given to save
    rebuilding the data set and family from the stored calibration file.
    """
    from .trials import read_trials

    out = Path(out)
    if cal is None:
        cal = _light_calibration(out)
    trials = read_trials(out / "trials.parquet")
    names = tuple(cal["names"]) if isinstance(cal, dict) else tuple(cal.problem.names)
    best, best_chi2, best_trial = _best_from_log(trials, names)
    posterior, bands, predictions = _load_optional(out)
    search_info = json.loads((out / SEARCH_FILE).read_text()) if (out / SEARCH_FILE).exists() else {}
    notes = json.loads((out / "notes.json").read_text()) if (out / "notes.json").exists() else []
    from .reference import load_reference_result

    reference = load_reference_result(out)
    checks = json.loads((out / CHECKS_FILE).read_text()) if (out / CHECKS_FILE).exists() else []
    stage_path = out / POSTERIOR_DIR / STAGE_FILE
    stage = json.loads(stage_path.read_text()) if stage_path.exists() else {}
    figures = _figures(out, cal, trials, posterior, bands, reference)
    summary: dict[str, Any] = {
        "profshape_version": __version__,
        "title": _get(cal, "title"),
        "family": _get(cal, "family"),
        "parameters": list(names),
        "best_coefficients": best,
        "best_reduced_chi2": best_chi2 if math.isfinite(best_chi2) else None,
        "best_trial": best_trial,
        "n_trials": len(trials),
        "n_failed": int((trials["status"] != "ok").sum()),
        "stop_reason": search_info.get("stop_reason", "not finished (no search.json)"),
        "stop_detail": search_info.get("stop_detail") or "",
        "on_bounds": search_info.get("on_bounds") or [],
        "trial_log": "trials.parquet",
        "posterior": None,
        "bands_files": {},
        "predictions_file": PREDICTIONS_FILE if predictions is not None else None,
        "predictions": [] if predictions is None else _clean(predictions.to_dict("records")),
        "figures": figures,
        "notes": notes,
        "best_fit": _best_fit(trials, posterior, names),
        "checks": checks,
        "checks_passed": bool(checks) and all(c["passed"] for c in checks),
        "report": REPORT_FILE,
        "reference": _reference_summary(reference, trials, best_trial),
    }
    if posterior is not None:
        summary["posterior"] = {
            "map_coefficients": posterior.map_coefficients,
            "map_source": posterior.map_source,
            "summary": _clean(posterior.summary().to_dict("records")),
            "diagnostics": _clean(posterior.diagnostics),
            "check": None if posterior.check is None else _clean(posterior.check.summary()),
            "samples_file": f"{POSTERIOR_DIR}/posterior_samples.parquet",
            "effective_sample_size": posterior.diagnostics.get("effective_sample_size_total"),
            "autocorr_time_steps": posterior.diagnostics.get("autocorr_time_steps"),
            "forward_runs": stage.get("forward_runs"),
            "forward_budget": stage.get("forward_budget"),
            "emulated_bands": stage.get("emulated_bands"),
        }
    if bands is not None:
        summary["bands_files"] = {name: f"{BANDS_DIR}/bands_{name}.parquet"
                                  for name in ("profile", "ion_velocity", "scalars", "draws")}
        summary["band_levels"] = list(bands.levels)
    _atomic_text(out / SUMMARY_FILE, json.dumps(_clean(summary), indent=2))
    _atomic_text(out / REPORT_FILE, _report_markdown(summary, posterior, bands, predictions, trials))
    return summary


def _reference_summary(reference: Any, trials: pd.DataFrame, best_trial: Any) -> Any:
    from .reference import reference_summary

    return reference_summary(reference, trials, best_trial)


def _best_fit(trials: pd.DataFrame, posterior: Any, names: tuple[str, ...]) -> Any:
    from .posterior.verdicts import best_fit

    return best_fit(trials, posterior, names)


def _get(cal: Any, key: str) -> Any:
    if isinstance(cal, dict):
        return cal.get(key)
    if key == "title":
        return cal.config.data.get("title")
    if key == "family":
        return cal.problem.family.name
    return None


def _light_calibration(out: Path) -> Any:
    """Data set, family and names from a calibration folder, without a forward model."""
    from .pipeline import Calibration, config_from_folder
    from .pipeline import _dataset as build_dataset
    from .pipeline import _device as build_device
    from .pipeline import _family as build_family

    cfg = config_from_folder(out)
    device = build_device(cfg)
    family = build_family(cfg, device)
    dataset = build_dataset(cfg)

    class _Problem:  # the parts of CalibrationProblem the report uses
        pass

    problem = _Problem()
    problem.family = family
    problem.dataset = dataset
    trials_cols = pd.read_parquet(out / "trials.parquet").columns
    problem.names = tuple(c[3:] for c in trials_cols if c.startswith("u__"))
    return Calibration(cfg, problem, device, None, [])  # type: ignore[arg-type]


def rebuild_report(out: str | Path) -> dict[str, Any]:
    """Rebuild figures, summary and report of a finished or running calibration.

    Raises
    ------
    InputDataError
        If ``out`` is not a calibration folder or has no trial log yet.
    """
    out = Path(out)
    if not (out / "trials.parquet").exists():
        raise InputDataError(f"{out}: no trials.parquet yet; nothing to report.")
    return write_outputs(out)


def _figures(out: Path, cal: Any, trials: pd.DataFrame, posterior: Any, bands: Any,
             reference: Any = None) -> list[str]:
    """Draw the figures into ``out/figures``; returns their paths relative to ``out``.

    A figure that cannot be drawn is skipped with a note in the report (the
    numbers are in the tables either way).
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from . import plots

    formats = ["png", "svg"]
    if cal is not None and hasattr(cal, "config") and cal.config is not None:
        formats = [str(f) for f in cal.config.section("output").get("figures", formats)]
    folder = out / FIGURES_DIR
    folder.mkdir(exist_ok=True)
    problem = cal.problem
    device = cal.device
    z_max = float(device.domain_length_m) if device is not None else None
    if z_max is None:
        zs = [p.ion_velocity.z_m for p in problem.dataset if p.ion_velocity is not None]
        z_max = float(max(z.max() for z in zs)) * 1.1 if zs else 0.1
    z = np.linspace(0.0, z_max, 200)
    units = list(problem.family.units) + ["log10(-)"] * (len(problem.names) - problem.family.n_coefficients)
    jobs = {
        "fit": lambda p: plots.plot_fit(problem.dataset, bands=bands,
                                        best=plots.best_fit_from_trials(trials), paths=p,
                                        reference=reference),
        "search_trace": lambda p: plots.plot_search_trace(trials, paths=p),
        "pairs": lambda p: plots.plot_pairs(trials, list(problem.names), posterior=posterior,
                                            paths=p, units=units),
        "shape_gallery": lambda p: plots.plot_shape_gallery(trials, z, family=problem.family, paths=p),
    }
    if bands is not None:
        length = getattr(device, "channel_length_m", None)
        field = getattr(device, "magnetic_field", None)
        jobs["profile_band"] = lambda p: plots.plot_profile_band(
            bands, paths=p, channel_length_m=length, reference=reference,
            magnetic_field_T=field, points={pt.label: pt for pt in problem.dataset.operating_points})
    written: list[str] = []
    for name, job in jobs.items():
        paths = [folder / f"{name}.{fmt}" for fmt in formats]
        try:
            with np.errstate(divide="ignore", invalid="ignore"):  # e.g. no successful trial
                fig = job(paths)
        except Exception as exc:  # a figure is a view of saved numbers; never lose the run to it
            warnings.warn(f"figure {name!r} not drawn: {type(exc).__name__}: {exc}",
                          ProfshapeWarning, stacklevel=2)
            continue
        plt.close(fig)
        written += [str(p.relative_to(out)) for p in paths if p.exists()]
    return written


def _fmt(x: Any, digits: int = 4) -> str:
    if isinstance(x, (bool, np.bool_)):
        return "yes" if x else "no"
    try:
        v = float(x)
    except (TypeError, ValueError):
        return str(x)
    if not math.isfinite(v):
        return "n/a"
    return f"{v:.{digits}g}"


def _best_fit_line(fit: Any) -> list[str]:
    if not fit or fit.get("source") == "trial":
        return []
    coeffs = ", ".join(f"{k} = {_fmt(v, 5)}" for k, v in fit["coefficients"].items())
    return [f"- Best fit of all real runs ({fit['source']}): reduced chi-square "
            f"{_fmt(fit['reduced_chi2'])}; {coeffs}"]


def _checks_section(checks: list[dict[str, Any]]) -> list[str]:
    from .posterior.verdicts import checks_markdown

    return checks_markdown(checks)


def _report_markdown(summary: dict[str, Any], posterior: Any, bands: Any,
                     predictions: pd.DataFrame | None, trials: pd.DataFrame) -> str:
    lines = [f"# Calibration report: {summary.get('title') or 'profshape calibration'}", ""]
    lines += [
        f"- Shape family: `{summary['family']}` ({len(summary['parameters'])} coefficients)",
        f"- Trials: {summary['n_trials']} ({summary['n_failed']} failed); stop reason: "
        f"{summary['stop_reason']}",
        f"- Best reduced chi-square: {_fmt(summary['best_reduced_chi2'])} (trial "
        f"{summary['best_trial']}); 1 is the noise floor.",
        *_best_fit_line(summary.get("best_fit")),
        f"- profshape {summary['profshape_version']}",
        "",
        *_checks_section(summary.get("checks") or []),
        "## Best fit",
        "",
        "| coefficient | best trial | posterior median | 68 % interval |",
        "|---|---|---|---|",
    ]
    post_rows = {r["name"]: r for r in (summary.get("posterior") or {}).get("summary", [])}
    if summary.get("reference"):
        from .reference import reference_markdown

        lines[lines.index("## Best fit"):lines.index("## Best fit")] = reference_markdown(summary)
    for name, value in (summary.get("best_coefficients") or {}).items():
        r = post_rows.get(name, {})
        interval = (f"[{_fmt(r.get('lower_0.68'))}, {_fmt(r.get('upper_0.68'))}]"
                    if "lower_0.68" in r else "n/a")
        lines.append(f"| `{name}` | {_fmt(value, 5)} | {_fmt(r.get('median'), 5)} | {interval} |")
    if posterior is not None:
        d = posterior.diagnostics
        how = ("on the forward model itself" if d.get("method") == "exact" else
               "on the output emulator, its predictive variance added to the data variance"
               if d.get("surrogate_of", "outputs") == "outputs" else
               "on the Gaussian-process surrogate of the log-likelihood")
        lines += ["", "## Posterior", "",
                  f"Sampled {how} (method: {d.get('method', 'n/a')}); MAP from "
                  f"{posterior.map_source}.",
                  f"Acceptance fraction: {_fmt(d.get('acceptance_fraction'))}; "
                  f"integrated autocorrelation time: {_fmt(d.get('autocorr_time_steps'))} steps; "
                  f"effective sample size: {_fmt(d.get('effective_sample_size_total'))} "
                  "(n_walkers x kept steps / tau, summed over ensembles)."]
        spent = (summary.get("posterior") or {}).get("forward_runs")
        if spent:
            lines.append("Forward runs of the posterior stage: " + ", ".join(
                f"{k} {v}" for k, v in spent.items())
                + f" (sampling budget {(summary.get('posterior') or {}).get('forward_budget')}).")
        if posterior.check is not None:
            c = posterior.check.summary()
            lines.append("Posterior predictive check (real forward runs of posterior draws): "
                         + ", ".join(f"{k} = {_fmt(v)}" for k, v in c.items()
                                     if isinstance(v, (int, float, bool))))
    if predictions is not None and len(predictions):
        lines += ["", "## Predictions with uncertainty", ""]
        cols = [c for c in predictions.columns if c.startswith(("lower_", "upper_"))]
        lines.append("| point | quantity | unit | median | " + " | ".join(cols) +
                     " | measured | extrapolation |")
        lines.append("|---" * (6 + len(cols)) + "|")
        for r in predictions.to_dict("records"):
            meas = (f"{_fmt(r.get('measured'))} ± {_fmt(r.get('measured_sigma'))}"
                    if r.get("measured") is not None and _fmt(r.get("measured")) != "n/a" else "")
            flagged = r.get("extrapolation") in (True, "True")
            extra = str(r.get("extrapolation_reason") or "") if flagged else ""
            lines.append(f"| {r['label']} | {r['name']} | {r.get('unit', '')} | {_fmt(r['median'])} | "
                         + " | ".join(_fmt(r[c]) for c in cols) + f" | {meas} | {extra} |")
    if summary["figures"]:
        lines += ["", "## Figures", ""]
        lines += [f"![{Path(f).stem}]({f})" for f in summary["figures"] if f.endswith(".png")]
    failed = trials[trials["status"] != "ok"]
    if len(failed):
        lines += ["", "## Failed trials", "", "| trial | status | reason |", "|---|---|---|"]
        for r in failed.head(20).to_dict("records"):
            reason = str(r.get("error", "")).replace("|", "/").replace("\n", " ")[:160]
            lines.append(f"| {r['trial']} | {r['status']} | {reason} |")
    if summary["notes"]:
        lines += ["", "## Notes", ""] + [f"- {n}" for n in summary["notes"]]
    lines += ["", "## Cautions", "",
              "- Calibrated predictions of lifetime or spacecraft interaction support, and never "
              "replace, qualification testing under the applicable standards.",
              "- Laboratory work with high voltage and vacuum follows local codes and licensed practice.",
              ""]
    return "\n".join(lines)
