"""Family comparison: each run's profile band beside its BIC difference to the best."""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from . import _style

__all__ = ["plot_comparison"]


def plot_comparison(
    table: pd.DataFrame,
    bands: Mapping[str, pd.DataFrame | None] | None = None,
    paths: str | Path | Iterable[str | Path] | None = None,
) -> Any:
    """Left: the 68 % profile band and median of each run (first operating point);
    right: BIC difference to the best family, with the verdict.

    Parameters
    ----------
    table : DataFrame
        From :func:`profshape.workflow.compare_runs.comparison_table` (``label``,
        ``family``, ``delta_bic``, ``verdict``, ``best_reduced_chi2``).
    bands : mapping of label to profile-band DataFrame, optional
    paths : path or paths, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    bands = dict(bands or {})
    labels = list(table["label"])
    with _style.style():
        fig = _style.new_figure(9.0, 3.6)
        ax_p, ax_b = fig.subplots(1, 2, width_ratios=[1.4, 1.0])
        quantity = None
        for k, lab in enumerate(labels):
            frame = bands.get(lab)
            if frame is None or not len(frame):
                continue
            first = frame["label"].iloc[0]
            f = frame[frame["label"] == first]
            quantity = str(f["quantity"].iloc[0]) if "quantity" in f else quantity
            z = 1e3 * f["z_m"].to_numpy(dtype=float)
            color = _style.PALETTE[k % len(_style.PALETTE)]
            if "lower_0.68" in f:
                ax_p.fill_between(z, f["lower_0.68"], f["upper_0.68"], color=color, alpha=0.18, lw=0)
            ax_p.plot(z, f["median"], color=color, ls=_style.DASHES[k % len(_style.DASHES)], lw=1.5,
                      label=f"{lab} ({table['family'].iloc[k]})")
        if quantity is not None:
            ax_p.set_yscale("log")
            ax_p.legend(loc="best", fontsize=7)
        ax_p.set_xlabel("axial position z [mm]")
        ax_p.set_ylabel("anomalous collision frequency [1/s]" if quantity == "frequency_hz"
                        else "Bohm-like anomalous coefficient [-]")
        ax_p.set_title("posterior median and 68 % band")
        delta = table["delta_bic"].to_numpy(dtype=float)
        y = np.arange(len(labels))[::-1]
        colors = [_style.PALETTE[k % len(_style.PALETTE)] for k in range(len(labels))]
        ax_b.barh(y, np.where(np.isfinite(delta), delta, 0.0), color=colors, height=0.6)
        for yy, d, verdict, chi in zip(y, delta, table["verdict"], table["best_reduced_chi2"],
                                       strict=True):
            text = f"{verdict}; χ²ᵣ = {chi:.3g}" if np.isfinite(chi) else verdict
            ax_b.annotate(text, (max(d, 0.0) if np.isfinite(d) else 0.0, yy), xytext=(4, 0),
                          textcoords="offset points", va="center", fontsize=7)
        ax_b.set_yticks(y, labels)
        ax_b.set_xlabel("BIC − best BIC [-]")
        ax_b.set_title("family ranking (lower is better)")
        right = float(np.nanmax(np.where(np.isfinite(delta), delta, 0.0))) if len(delta) else 1.0
        ax_b.set_xlim(0, max(right, 1.0) * 1.9)
        ax_b.grid(axis="y", visible=False)
    _style.save(fig, paths)
    return fig
