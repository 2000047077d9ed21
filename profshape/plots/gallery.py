"""A gallery of the shapes the search proposed, in trial order."""

from __future__ import annotations

import math
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import InputDataError
from . import _style

__all__ = ["gallery_selection", "plot_shape_gallery", "shapes_from_trials"]


def shapes_from_trials(
    trials: pd.DataFrame, family: Any, z_m: np.ndarray
) -> np.ndarray:
    """Profile values of every trial's coefficients (family columns), shape (n_trials, n_z)."""
    names = list(family.names)
    missing = [n for n in names if n not in trials]
    if missing:
        raise InputDataError(f"shapes_from_trials: the trial log lacks columns {missing}.")
    coeffs = trials[names].to_numpy(dtype=float)
    return np.asarray(family.evaluate(coeffs, np.asarray(z_m, dtype=float)), dtype=float)


def gallery_selection(n_trials: int, max_shapes: int, best: int | None) -> list[int]:
    """Row positions shown: the latest quarter, the best, then the earliest, in order.

    Parameters
    ----------
    n_trials : int
        Rows of the (trial-sorted) log.
    max_shapes : int
        Panels available.
    best : int or None
        Row of the best trial.
    """
    n = min(int(max_shapes), int(n_trials))
    if n_trials <= n:
        return list(range(n_trials))
    chosen: list[int] = []
    if best is not None:
        chosen.append(int(best))
    n_latest = max(1, n // 4)
    for k in range(n_trials - 1, -1, -1):
        if len(chosen) >= 1 + n_latest or len(chosen) >= n:
            break
        if k not in chosen:
            chosen.append(k)
    for k in range(n_trials):
        if len(chosen) >= n:
            break
        if k not in chosen:
            chosen.append(k)
    return sorted(chosen)


def plot_shape_gallery(
    trials: pd.DataFrame,
    z_m: np.ndarray,
    *,
    family: Any = None,
    profiles: np.ndarray | None = None,
    quantity: str = "anomalous profile [-]",
    max_shapes: int = 24,
    n_columns: int = 6,
    paths: str | Path | Iterable[str | Path] | None = None,
) -> Any:
    """Small multiples of proposed shapes in trial order, shaded by misfit.

    Parameters
    ----------
    trials : DataFrame
        Trial log (``trial``, ``status``, ``reduced_chi2`` and, with
        ``family``, the family's coefficient columns).
    z_m : ndarray of shape (n_z,)
        Positions [m].
    family : ShapeFamily, optional
        Evaluates the shapes from the log's coefficients (no forward run).
    profiles : ndarray of shape (n_trials, n_z), optional
        Precomputed shapes instead of ``family``.
    quantity : str
        Y-axis label with unit, e.g. ``"Bohm-like coefficient [-]"``.
    max_shapes : int, default=24
        Panels at most. With more trials, the gallery shows the earliest ones,
        the latest quarter and always the best trial (framed), in trial order
        (see :func:`gallery_selection`).
    n_columns : int, default=6
    paths : path or paths, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib import colormaps
    from matplotlib.colors import Normalize
    from matplotlib.ticker import LogLocator, NullLocator

    df = trials.sort_values("trial", kind="stable").reset_index(drop=True) if "trial" in trials \
        else trials.reset_index(drop=True)
    z = np.asarray(z_m, dtype=float)
    if profiles is None:
        if family is None:
            raise InputDataError("plot_shape_gallery: give family or profiles.")
        if family is not None and getattr(family, "kind", "") == "frequency":
            quantity = "anomalous frequency [1/s]" if quantity.startswith("anomalous profile") \
                else quantity
        elif family is not None and quantity.startswith("anomalous profile"):
            quantity = "Bohm-like coefficient [-]"
        profiles = shapes_from_trials(df, family, z)
    profiles = np.atleast_2d(np.asarray(profiles, dtype=float))
    if profiles.shape != (len(df), len(z)):
        raise InputDataError(
            f"plot_shape_gallery: profiles have shape {profiles.shape}; expected "
            f"({len(df)}, {len(z)}) (one row per trial, one column per z)."
        )
    n = min(int(max_shapes), len(df))
    if n < 1:
        raise InputDataError("plot_shape_gallery: the trial log is empty.")
    r = pd.to_numeric(df["reduced_chi2"], errors="coerce").to_numpy(dtype=float)
    ok = (df["status"] == "ok").to_numpy() & np.isfinite(r) & (r > 0)
    best_k = int(np.nanargmin(np.where(ok, r, np.nan))) if ok.any() else None
    keep = gallery_selection(len(df), n, best_k)
    n_total = len(df)
    df, profiles, r, ok = df.iloc[keep].reset_index(drop=True), profiles[keep], r[keep], ok[keep]
    best_k = keep.index(best_k) if best_k is not None else None
    logr = np.log10(np.where(ok, r, np.nan))
    norm = Normalize(np.nanmin(logr[:n]) if ok[:n].any() else 0.0,
                     np.nanmax(logr[:n]) if ok[:n].any() else 1.0)
    cmap = colormaps[_style.CMAP_REVERSED]
    ncol = max(1, min(int(n_columns), n))
    nrow = math.ceil(n / ncol)
    finite = profiles[:n][np.isfinite(profiles[:n]) & (profiles[:n] > 0)]
    y_lim = (finite.min() / 1.5, finite.max() * 1.5) if finite.size else None
    with _style.style():
        # a fixed grid layout: constrained layout is slow for many small log-scale panels
        fig = _style.new_figure(1.55 * ncol + 1.2, 1.35 * nrow + 0.7, layout=None)
        fig.subplots_adjust(left=0.09, right=0.86, bottom=0.1 + 0.05 / nrow, top=0.93,
                            wspace=0.12, hspace=0.45)
        axes = np.atleast_1d(fig.subplots(nrow, ncol, squeeze=False, sharex=True,
                                          sharey=True)).ravel()
        for k in range(n):
            ax = axes[k]
            trial_no = int(df["trial"].iloc[k]) if "trial" in df else k
            if ok[k]:
                ax.plot(1e3 * z, profiles[k], color=cmap(norm(logr[k])), lw=1.6)
                is_best = k == best_k
                ax.set_title(f"#{trial_no}  χ²ᵣ={r[k]:.3g}" + ("  best" if is_best else ""),
                             fontsize=7.5, fontweight="bold" if is_best else "normal")
                ax.set_facecolor("#f4f4f0")
                if is_best:
                    for side in ax.spines.values():
                        side.set_visible(True)
                        side.set_color(_style.BEST)
                        side.set_linewidth(1.6)
            else:
                ax.plot(1e3 * z, profiles[k], color=_style.FAIL, lw=1.0, ls="--")
                ax.set_title(f"#{trial_no}  {df['status'].iloc[k]}", fontsize=7.5,
                             color=_style.FAIL)
            ax.set_yscale("log")
            ax.yaxis.set_major_locator(LogLocator(numticks=4))
            ax.yaxis.set_minor_locator(NullLocator())  # minor log ticks are slow on many panels
            if y_lim is not None:
                ax.set_ylim(*y_lim)
            ax.tick_params(labelsize=6.5)
            ax.grid(False)
        for ax in axes[n:]:
            ax.set_visible(False)
        if n_total > n:
            fig.suptitle(f"{n} of {n_total} trials: the earliest, the best (framed) and the latest",
                         fontsize=8.5, y=0.995)
        fig.supxlabel("axial position z [mm]", fontsize=8.5)
        fig.supylabel(quantity, fontsize=8.5)
        from matplotlib.cm import ScalarMappable

        sm = ScalarMappable(norm=norm, cmap=cmap)
        cbar = fig.colorbar(sm, cax=fig.add_axes((0.89, 0.2, 0.015, 0.6)))
        cbar.set_label("log10 reduced chi-square [-]")
    _style.save(fig, paths)
    return fig
