"""The report: figures, ``summary.json`` and ``report.md`` rendered from an output folder's files.

A read-only renderer: it runs no forward model and computes nothing new; it
reads the trial log and what :mod:`profshape.workflow.after_search` saved
(posterior, bands, predictions, checks, notes) and draws and writes from them.
:func:`rebuild_report` (``profshape report``) does the same for any folder,
finished or running. Figures are drawn on :class:`matplotlib.figure.Figure`
objects, never through pyplot, so the session's backend is left alone.
"""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._version import __version__
from ..atomic_write import atomic_write_json, atomic_write_text, json_safe
from ..exceptions import InputDataError, ProfshapeWarning
from ..posterior.bands import BAND_TABLES, band_file
from ..posterior.result import SAMPLES_FILE
from .build import Calibration, ReportInputs, report_inputs
from .layout import (
    BANDS_DIR,
    BANDS_PROFILE_FILE,
    CHECKS_FILE,
    FIGURES_DIR,
    NOTES_FILE,
    POSTERIOR_DIR,
    POSTERIOR_FILE,
    PREDICTIONS_FILE,
    REPORT_FILE,
    SEARCH_FILE,
    STAGE_FILE,
    SUMMARY_FILE,
    TRIALS_FILE,
)

__all__ = ["rebuild_report", "write_outputs"]


# ------------------------------------------------------------------ outputs
def _load_optional(out: Path) -> tuple[Any, Any, pd.DataFrame | None]:
    from ..posterior import PosteriorBands, PosteriorResult

    posterior = bands = predictions = None
    if (out / POSTERIOR_DIR / POSTERIOR_FILE).exists():
        posterior = PosteriorResult.load(out / POSTERIOR_DIR)
    if (out / BANDS_DIR / BANDS_PROFILE_FILE).exists():
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
    row = ok.iloc[int(ok["reduced_chi2"].to_numpy().argmin())]
    return ({n: float(row[n]) for n in names}, float(row["reduced_chi2"]), int(row["trial"]))


def write_outputs(out: str | Path, cal: Calibration | ReportInputs | None = None) -> dict[str, Any]:
    """Figures, ``summary.json`` and ``report.md`` from the files in ``out``.

    Runs no forward model. ``cal`` (a built :class:`Calibration`, or its
    :class:`ReportInputs`) may be given to save rebuilding the data set and
    family from the stored calibration file.
    """
    from ..trials import read_trials

    out = Path(out)
    inputs = (report_inputs(out) if cal is None else
              ReportInputs.of(cal) if isinstance(cal, Calibration) else cal)
    trials = read_trials(out / TRIALS_FILE)
    names = inputs.names
    best, best_chi2, best_trial = _best_from_log(trials, names)
    posterior, bands, predictions = _load_optional(out)
    search_info = json.loads((out / SEARCH_FILE).read_text()) if (out / SEARCH_FILE).exists() else {}
    notes = json.loads((out / NOTES_FILE).read_text()) if (out / NOTES_FILE).exists() else []
    from ..reference import load_reference_result

    reference = load_reference_result(out)
    checks = json.loads((out / CHECKS_FILE).read_text()) if (out / CHECKS_FILE).exists() else []
    stage_path = out / POSTERIOR_DIR / STAGE_FILE
    stage = json.loads(stage_path.read_text()) if stage_path.exists() else {}
    figures = _figures(out, inputs, trials, posterior, bands, reference)
    summary: dict[str, Any] = {
        "profshape_version": __version__,
        "title": inputs.config.data.get("title") if inputs.config is not None else None,
        "family": inputs.family.name,
        "parameters": list(names),
        "best_coefficients": best,
        "best_reduced_chi2": best_chi2 if math.isfinite(best_chi2) else None,
        "best_trial": best_trial,
        "n_trials": len(trials),
        "n_failed": int((trials["status"] != "ok").sum()),
        "stop_reason": search_info.get("stop_reason", "not finished (no search.json)"),
        "stop_detail": search_info.get("stop_detail") or "",
        "on_bounds": search_info.get("on_bounds") or [],
        "trial_log": TRIALS_FILE,
        "posterior": None,
        "bands_files": {},
        "predictions_file": PREDICTIONS_FILE if predictions is not None else None,
        "predictions": [] if predictions is None else json_safe(predictions.to_dict("records")),
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
            "summary": json_safe(posterior.summary().to_dict("records")),
            "diagnostics": json_safe(posterior.diagnostics),
            "check": None if posterior.check is None else json_safe(posterior.check.summary()),
            "samples_file": f"{POSTERIOR_DIR}/{SAMPLES_FILE}",
            "effective_sample_size": posterior.diagnostics.get("effective_sample_size_total"),
            "autocorr_time_steps": posterior.diagnostics.get("autocorr_time_steps"),
            "forward_runs": stage.get("forward_runs"),
            "forward_budget": stage.get("forward_budget"),
            "emulated_bands": stage.get("emulated_bands"),
        }
    if bands is not None:
        summary["bands_files"] = {name: f"{BANDS_DIR}/{band_file(name)}" for name in BAND_TABLES}
        summary["band_levels"] = list(bands.levels)
    atomic_write_json(out / SUMMARY_FILE, json_safe(summary))
    atomic_write_text(out / REPORT_FILE, _report_markdown(summary, posterior, bands, predictions, trials))
    return summary


def _reference_summary(reference: Any, trials: pd.DataFrame, best_trial: Any) -> Any:
    from ..reference import reference_summary

    return reference_summary(reference, trials, best_trial)


def _best_fit(trials: pd.DataFrame, posterior: Any, names: tuple[str, ...]) -> Any:
    from ..posterior.verdicts import best_fit

    return best_fit(trials, posterior, names)


def rebuild_report(out: str | Path) -> dict[str, Any]:
    """Rebuild figures, summary and report of a finished or running calibration.

    Raises
    ------
    InputDataError
        If ``out`` is not a calibration folder or has no trial log yet.
    """
    out = Path(out)
    if not (out / TRIALS_FILE).exists():
        raise InputDataError(f"{out}: no {TRIALS_FILE} yet; nothing to report.")
    return write_outputs(out)


def _figures(out: Path, inputs: ReportInputs, trials: pd.DataFrame, posterior: Any, bands: Any,
             reference: Any = None) -> list[str]:
    """Draw the figures into ``out/figures``; returns their paths relative to ``out``.

    A figure that cannot be drawn is skipped with a note in the report (the
    numbers are in the tables either way).
    """
    from .. import plots  # Figure objects with their own canvas: pyplot's backend is untouched

    formats = ["png", "svg"]
    if inputs.config is not None:
        formats = [str(f) for f in inputs.config.section("output").get("figures", formats)]
    folder = out / FIGURES_DIR
    folder.mkdir(exist_ok=True)
    device = inputs.device
    z_max = float(device.domain_length_m) if device is not None else None
    if z_max is None:
        zs = [p.ion_velocity.z_m for p in inputs.dataset if p.ion_velocity is not None]
        z_max = float(max(z.max() for z in zs)) * 1.1 if zs else 0.1
    z = np.linspace(0.0, z_max, 200)
    units = list(inputs.family.units) + ["log10(-)"] * (len(inputs.names) - inputs.family.n_coefficients)
    jobs = {
        "fit": lambda p: plots.plot_fit(inputs.dataset, bands=bands,
                                        best=plots.best_fit_from_trials(trials), paths=p,
                                        reference=reference),
        "search_trace": lambda p: plots.plot_search_trace(trials, paths=p),
        "pairs": lambda p: plots.plot_pairs(trials, list(inputs.names), posterior=posterior,
                                            paths=p, units=units),
        "shape_gallery": lambda p: plots.plot_shape_gallery(trials, z, family=inputs.family, paths=p),
    }
    if bands is not None:
        length = getattr(device, "channel_length_m", None)
        field = getattr(device, "magnetic_field", None)
        jobs["profile_band"] = lambda p: plots.plot_profile_band(
            bands, paths=p, channel_length_m=length, reference=reference,
            magnetic_field_T=field, points={pt.label: pt for pt in inputs.dataset.operating_points})
    written: list[str] = []
    for name, job in jobs.items():
        paths = [folder / f"{name}.{fmt}" for fmt in formats]
        try:
            with np.errstate(divide="ignore", invalid="ignore"):  # e.g. no successful trial
                job(paths)
        except Exception as exc:  # a figure is a view of saved numbers; never lose the run to it
            warnings.warn(f"figure {name!r} not drawn: {type(exc).__name__}: {exc}",
                          ProfshapeWarning, stacklevel=2)
            continue
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
    from ..posterior.verdicts import checks_markdown

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
        from ..reference import reference_markdown

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
