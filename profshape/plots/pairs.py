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
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from matplotlib.ticker import MaxNLocator

    def label(k: int) -> str:  # name and unit on two lines: long names do not run into each other
        return f"{names[k]}\n[{units[k]}]"

    with _style.style():
        # a fixed grid (margins in inches): constrained layout costs seconds on d x d panels
        width, height = 2.0 * d + 1.6, 2.0 * d + 0.9
        fig = _style.new_figure(width, height, layout=None)
        fig.subplots_adjust(left=1.05 / width, right=1.0 - 1.1 / width, bottom=0.95 / height,
                            top=1.0 - 0.15 / height, wspace=0.08, hspace=0.08)
        axes = np.atleast_2d(fig.subplots(d, d, squeeze=False))
        mappable = None
        for i in range(d):
            for j in range(d):
                ax = axes[i, j]
                if j > i:
                    ax.set_visible(False)
                    continue
                ax.xaxis.set_major_locator(MaxNLocator(4))
                if i == j:
                    x = trials.loc[ok, names[i]].to_numpy(dtype=float)
                    ax.hist(x, bins=20, color=_style.BAND_FILLS[0], histtype="stepfilled",
                            density=True)
                    if samples is not None:
                        ax.hist(samples[names[i]], bins=30, histtype="step", density=True,
                                color=_style.POSTERIOR, lw=1.2)
                    ax.set_yticks([])
                else:
                    ax.yaxis.set_major_locator(MaxNLocator(4))
                    xj = trials[names[j]].to_numpy(dtype=float)
                    yi = trials[names[i]].to_numpy(dtype=float)
                    if samples is not None:  # under the trials, rasterised (a light SVG)
                        ax.scatter(samples[names[j]], samples[names[i]], s=3.0,
                                   color=_style.POSTERIOR, alpha=0.3, lw=0, marker=".",
                                   rasterized=True, zorder=1)
                    mappable = ax.scatter(xj[ok], yi[ok], c=shade, cmap=_style.CMAP_REVERSED,
                                          s=16, marker="o", edgecolor="white", lw=0.4, zorder=2)
                    if (~ok).any():
                        ax.scatter(xj[~ok], yi[~ok], marker="x", s=14, color=_style.FAIL,
                                   lw=0.9, zorder=3)
                if i == d - 1:
                    ax.set_xlabel(label(j))
                    ax.tick_params(axis="x", labelrotation=30)
                else:
                    ax.tick_params(labelbottom=False)
                if j == 0 and i != 0:
                    ax.set_ylabel(label(i))
                else:
                    ax.tick_params(labelleft=False)
        fig.align_labels()
        handles = [Patch(color=_style.BAND_FILLS[0], label="ok trials (histogram)"),
                   Line2D([], [], marker="o", ls="none", color=_style.MEDIAN, label="ok trials, "
                          "shaded by misfit")]
        if (~ok).any():
            handles.append(Line2D([], [], marker="x", ls="none", color=_style.FAIL,
                                  label="failed trials"))
        if samples is not None:
            handles += [Line2D([], [], color=_style.POSTERIOR, lw=1.2, label="posterior (histogram)"),
                        Line2D([], [], marker=".", ls="none", color=_style.POSTERIOR,
                               label="posterior sample")]
        if mappable is not None:
            cax = fig.add_axes((1.0 - 0.95 / width, 0.95 / height, 0.18 / width, 0.45))
            cbar = fig.colorbar(mappable, cax=cax)
            cbar.set_label("log10 reduced chi-square [-]")
        # the empty upper triangle holds the legend, clear of every panel
        fig.legend(handles=handles, loc="upper right", bbox_to_anchor=(0.99, 0.99), fontsize=7.5)
    _style.save(fig, paths)
    return fig
