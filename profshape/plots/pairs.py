"""Pairwise coefficient scatter of all trials shaded by misfit, posterior overlaid."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import InputDataError
from . import _style

__all__ = ["plot_pairs"]


def plot_pairs(
    trials: pd.DataFrame,
    names: Sequence[str],
    posterior: Any = None,
    paths: str | Path | Iterable[str | Path] | None = None,
    *,
    units: Sequence[str] | None = None,
    max_posterior_points: int = 3000,
    seed: int | None = 0,
) -> Any:
    """Corner-style scatter of every pair of coefficients.

    Parameters
    ----------
    trials : DataFrame
        Trial log with one column per name and ``status``, ``reduced_chi2``.
    names : sequence of str
        Parameters to show (physical units).
    posterior : PosteriorResult or DataFrame, optional
        Posterior sample (columns by name), drawn as small dark points and as
        histograms on the diagonal.
    paths : path or paths, optional
    units : sequence of str, optional
        Units of ``names`` for the axis labels (default ``"-"``).
    max_posterior_points : int, default=3000
    seed : int or None, default=0

    Returns
    -------
    matplotlib.figure.Figure
    """
    names = list(names)
    missing = [n for n in names if n not in trials]
    if missing:
        raise InputDataError(f"plot_pairs: the trial log lacks columns {missing}.")
    units = list(units) if units is not None else ["-"] * len(names)
    if len(units) != len(names):
        raise InputDataError(
            f"plot_pairs: {len(units)} units given for {len(names)} names; give one per name."
        )
    samples = getattr(posterior, "samples", posterior)
    if samples is not None:
        samples = pd.DataFrame(samples)[names]
        if len(samples) > max_posterior_points:
            samples = samples.sample(max_posterior_points, random_state=seed)
    r = pd.to_numeric(trials["reduced_chi2"], errors="coerce").to_numpy(dtype=float)
    ok = (trials["status"] == "ok").to_numpy() & np.isfinite(r) & (r > 0)
    shade = np.log10(r[ok])
    d = len(names)
    with _style.style():
        fig = _style.new_figure(1.9 * d + 1.0, 1.9 * d)
        axes = np.atleast_2d(fig.subplots(d, d, squeeze=False))
        mappable = None
        for i in range(d):
            for j in range(d):
                ax = axes[i, j]
                if j > i:
                    ax.set_visible(False)
                    continue
                if i == j:
                    x = trials.loc[ok, names[i]].to_numpy(dtype=float)
                    ax.hist(x, bins=20, color=_style.BAND_FILLS[0], histtype="stepfilled",
                            density=True, label="ok trials")
                    if samples is not None:
                        ax.hist(samples[names[i]], bins=30, histtype="step", density=True,
                                color=_style.POSTERIOR, lw=1.2, label="posterior")
                    ax.set_yticks([])
                else:
                    xj = trials[names[j]].to_numpy(dtype=float)
                    yi = trials[names[i]].to_numpy(dtype=float)
                    mappable = ax.scatter(xj[ok], yi[ok], c=shade, cmap=_style.CMAP_REVERSED,
                                          s=10, marker="o", lw=0)
                    if (~ok).any():
                        ax.scatter(xj[~ok], yi[~ok], marker="x", s=12, color=_style.FAIL,
                                   lw=0.8)
                    if samples is not None:
                        ax.scatter(samples[names[j]], samples[names[i]], s=1.0,
                                   color=_style.POSTERIOR, alpha=0.25, lw=0, marker=".")
                if i == d - 1:
                    ax.set_xlabel(f"{names[j]} [{units[j]}]")
                else:
                    ax.tick_params(labelbottom=False)
                if j == 0 and i != 0:
                    ax.set_ylabel(f"{names[i]} [{units[i]}]")
                elif i == j == 0:
                    ax.set_ylabel(f"{names[i]} [{units[i]}]")
                else:
                    ax.tick_params(labelleft=False)
        if mappable is not None:
            cbar = fig.colorbar(mappable, ax=axes.ravel().tolist(), shrink=0.6)
            cbar.set_label("log10 reduced chi-square [-]")
        axes[0, 0].legend(loc="upper right", fontsize=7)
    _style.save(fig, paths)
    return fig
