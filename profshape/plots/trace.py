"""The search trace: reduced chi-square of each trial and the best so far, failures marked."""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import InputDataError
from . import _style

__all__ = ["plot_search_trace"]

_FAIL_MARKERS = {"failed": "x", "timeout": "v", "not_converged": "d"}


def plot_search_trace(
    trials: pd.DataFrame,
    paths: str | Path | Iterable[str | Path] | None = None,
) -> Any:
    """Best reduced chi-square against trial number.

    Parameters
    ----------
    trials : DataFrame
        Trial log with ``trial``, ``status``, ``reduced_chi2`` (``source``
        optional: initial-design trials are drawn with a different marker).
    paths : path or paths, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    missing = [c for c in ("trial", "status", "reduced_chi2") if c not in trials]
    if missing:
        raise InputDataError(f"plot_search_trace: the trial log lacks columns {missing}.")
    df = trials.sort_values("trial", kind="stable")
    n = df["trial"].to_numpy(dtype=float)
    r = pd.to_numeric(df["reduced_chi2"], errors="coerce").to_numpy(dtype=float)
    ok = (df["status"] == "ok").to_numpy() & np.isfinite(r) & (r > 0)
    best = np.fmin.accumulate(np.where(ok, r, np.inf))
    with _style.style():
        fig = _style.new_figure(5.6, 3.3)
        ax = fig.subplots()
        source = df["source"].astype(str).to_numpy() if "source" in df else np.full(len(df), "")
        initial = source == "initial"
        ax.scatter(n[ok & initial], r[ok & initial], s=14, marker="s", facecolor="none",
                   edgecolor=_style.MEDIAN, lw=0.8, label="initial design")
        ax.scatter(n[ok & ~initial], r[ok & ~initial], s=14, marker="o",
                   color=_style.MEDIAN, alpha=0.7, lw=0, label="proposed trials")
        finite = np.isfinite(best)
        ax.step(n[finite], best[finite], where="post", color=_style.BEST, lw=1.6,
                label="best so far")
        ax.set_yscale("log")
        lo = np.nanmin(r[ok]) if ok.any() else 1.0
        y_fail = lo / 1.6
        for status, marker in _FAIL_MARKERS.items():
            sel = (df["status"] == status).to_numpy()
            if sel.any():
                ax.scatter(n[sel], np.full(sel.sum(), y_fail), marker=marker, s=22,
                           color=_style.FAIL, lw=1.0, label=f"{status} ({sel.sum()})")
        ax.axhline(1.0, color=_style.INK, lw=0.6, ls=":")
        ax.set_xlabel("trial number [-]")
        ax.set_ylabel("reduced chi-square [-]")
        ax.legend(loc="upper right")
    _style.save(fig, paths)
    return fig
