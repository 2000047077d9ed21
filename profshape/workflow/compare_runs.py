"""``profshape compare RUN1 RUN2 ...``: rank the shape families of finished runs.

Each run folder is rebuilt from its stored calibration file (no forward run);
:func:`profshape.posterior.compare.compare_families` ranks them by BIC (with
AIC, the BIC weight, the Kass and Raftery verdict and, where the run has a
posterior, the Laplace estimate of the log evidence), and this module adds
the best reduced chi-square, the best trial and each coefficient's posterior
median with its 68 % interval. It writes ``comparison.csv``,
``comparison.md`` and the figure ``comparison.png``/``.svg`` (each run's
profile band side by side with the BIC differences). The runs must share their
data (same number of data values).
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import InputDataError

__all__ = ["compare_runs", "comparison_table", "format_comparison"]


def _labels(runs: Sequence[Path]) -> list[str]:
    names = [r.resolve().name for r in runs]
    if len(set(names)) == len(names):
        return names
    return [f"{r.resolve().parent.name}/{r.resolve().name}" for r in runs]


def _intervals(posterior: Any) -> str:
    if posterior is None:
        return ""
    rows = posterior.summary().to_dict("records")
    parts = []
    for r in rows:
        if "lower_0.68" in r:
            parts.append(f"{r['name']} = {r['median']:.4g} [{r['lower_0.68']:.4g}, {r['upper_0.68']:.4g}]")
    return "; ".join(parts)


def comparison_table(runs: Sequence[str | Path], criterion: str = "bic") -> tuple[pd.DataFrame, dict]:
    """The family table of finished runs, best first, and what the figure needs.

    Returns
    -------
    table : DataFrame
        The columns of ``compare_families`` plus ``run``, ``best_trial`` and
        ``intervals_68`` (posterior median and 68 % interval per coefficient).
    extra : dict
        ``bands`` (label -> profile band DataFrame or None).

    Raises
    ------
    InputDataError
        Fewer than two runs, a folder that is not a calibration, or runs on
        different data.
    """
    from ..posterior import PosteriorBands, PosteriorResult
    from ..posterior.compare import compare_families
    from ..trials import read_trials
    from .build import build_calibration
    from .folder import config_from_folder
    from .layout import BANDS_DIR, BANDS_PROFILE_FILE, POSTERIOR_DIR, POSTERIOR_FILE, TRIALS_FILE

    paths = [Path(r) for r in runs]
    if len(paths) < 2:
        raise InputDataError("compare: give at least two calibration folders.")
    labels = _labels(paths)
    entries, posteriors, bands, best_trials, intervals = [], {}, {}, {}, {}
    for label, run in zip(labels, paths, strict=True):
        if not (run / TRIALS_FILE).exists():
            raise InputDataError(f"compare: {run} has no trials.parquet; give calibration output "
                                 "folders.")
        cal = build_calibration(config_from_folder(run), run, progress=False)
        trials = read_trials(run / TRIALS_FILE)
        entries.append((label, cal.problem, trials))
        post = PosteriorResult.load(run / POSTERIOR_DIR) \
            if (run / POSTERIOR_DIR / POSTERIOR_FILE).exists() else None
        if post is not None:
            posteriors[label] = post
        bands[label] = PosteriorBands.load(run / BANDS_DIR).profile \
            if (run / BANDS_DIR / BANDS_PROFILE_FILE).exists() else None
        ok = trials[trials["status"] == "ok"]
        best_trials[label] = (
            int(ok["trial"].to_numpy()[np.nanargmin(ok["reduced_chi2"].to_numpy(dtype=float))])
            if len(ok) else None)
        intervals[label] = _intervals(post)
    table = compare_families(entries, posteriors=posteriors, criterion=criterion)
    table.insert(2, "run", [str(paths[labels.index(lab)]) for lab in table["label"]])
    table["best_trial"] = [best_trials[lab] for lab in table["label"]]
    table["intervals_68"] = [intervals[lab] for lab in table["label"]]
    return table, {"bands": bands}


def format_comparison(table: pd.DataFrame) -> str:
    """The table as Markdown (the text ``profshape compare`` prints)."""

    def f(x: Any, d: int = 4) -> str:
        try:
            v = float(x)
        except (TypeError, ValueError):
            return str(x)
        return "n/a" if not math.isfinite(v) else f"{v:.{d}g}"

    head = ("| rank | run | family | k | best reduced chi-square | BIC | delta BIC | BIC weight | "
            "ln evidence (Laplace) | verdict |")
    lines = [head, "|---" * 10 + "|"]
    for r in table.to_dict("records"):
        lines.append(f"| {r['rank']} | {r['label']} | {r['family']} | {r['n_coefficients']} | "
                     f"{f(r['best_reduced_chi2'])} | {f(r['bic'], 6)} | {f(r['delta_bic'])} | "
                     f"{f(r['bic_weight'], 3)} | {f(r['log_evidence_laplace'], 6)} | {r['verdict']} |")
    lines += ["", "Posterior medians and 68 % intervals:", ""]
    for r in table.to_dict("records"):
        lines.append(f"- {r['label']}: {r['intervals_68'] or 'no posterior'}")
    return "\n".join(lines) + "\n"


def compare_runs(runs: Sequence[str | Path], out: str | Path | None = None, *,
                 criterion: str = "bic", figures: Sequence[str] = ("png", "svg")) -> dict[str, Any]:
    """Compare runs, write the table and the figure into ``out``; return them.

    Parameters
    ----------
    runs : sequence of path-like
        Calibration output folders fitted to the same data.
    out : path-like, optional
        Folder for ``comparison.csv``, ``comparison.md`` and the figure
        (default a new ``profshape-compare-*`` folder here).
    criterion : {"bic", "aic", "laplace"}
    figures : formats of the figure.

    Returns
    -------
    dict
        ``table`` (DataFrame), ``text`` (Markdown), ``folder`` and ``files``.
    """
    from ..atomic_write import atomic_write_bytes
    from ..plots.compare import plot_comparison

    table, extra = comparison_table(runs, criterion)
    if out is None:
        stamp = time.strftime("%Y%m%d-%H%M%S")
        out = Path.cwd() / f"profshape-compare-{stamp}"
    folder = Path(out)
    folder.mkdir(parents=True, exist_ok=True)
    text = format_comparison(table)
    atomic_write_bytes(folder / "comparison.csv", lambda tmp: table.to_csv(tmp, index=False))
    atomic_write_bytes(folder / "comparison.md",
                       lambda tmp: Path(tmp).write_text("# Family comparison\n\n" + text,
                                                        encoding="utf-8"))
    paths = [folder / f"comparison.{fmt}" for fmt in figures]
    plot_comparison(table, extra["bands"], paths=paths)
    return {"table": table, "text": text, "folder": folder,
            "files": [folder / "comparison.csv", folder / "comparison.md", *paths]}
