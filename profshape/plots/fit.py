"""Measured ion velocity with error bars, best fit and credible bands per operating point."""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import InputDataError
from . import _style

__all__ = ["best_fit_from_trials", "plot_fit"]


def best_fit_from_trials(trials: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """Ion-velocity predictions of the best ok trial, per label, from the log's JSON column.

    Returns
    -------
    dict of label to DataFrame
        Columns ``z_m`` [m] and ``ion_velocity_m_s`` [m/s].
    """
    from ..trials import read_predictions

    if "reduced_chi2" not in trials or "predictions" not in trials:
        raise InputDataError(
            "best_fit_from_trials: the trial log needs columns reduced_chi2 and predictions."
        )
    ok = trials[(trials["status"] == "ok") & np.isfinite(trials["reduced_chi2"])]
    if ok.empty:
        return {}
    row = ok.loc[ok["reduced_chi2"].idxmin()]
    out = {}
    for label, pred in read_predictions(row).items():
        if pred.get("z_m") is not None and pred.get("ion_velocity_m_s") is not None:
            out[label] = pd.DataFrame({"z_m": pred["z_m"],
                                       "ion_velocity_m_s": pred["ion_velocity_m_s"]})
    return out


def _data_frames(dataset: Any) -> dict[str, tuple[pd.DataFrame, str]]:
    out = {}
    if isinstance(dataset, Mapping):
        for label, frame in dataset.items():
            out[str(label)] = (pd.DataFrame(frame), str(label))
        return out
    for item in dataset:
        if item.ion_velocity is None:
            continue
        p = item.point
        title = (f"{p.label}: {p.discharge_voltage_V:g} V, "
                 f"{1e6 * p.anode_mass_flow_kg_s:.3g} mg/s")
        out[item.label] = (item.ion_velocity.to_frame(), title)
    return out


def plot_fit(
    dataset: Any,
    bands: Any = None,
    best: Mapping[str, pd.DataFrame] | None = None,
    paths: str | Path | Iterable[str | Path] | None = None,
    *,
    n_columns: int = 3,
) -> Any:
    """Data with error bars, best fit and credible bands, one panel per operating point.

    Parameters
    ----------
    dataset : DataSet or mapping of label to DataFrame
        The measurements; DataFrames need ``z_m`` [m], ``ion_velocity_m_s`` and
        ``sigma_ion_velocity_m_s`` [m/s] (``sigma_z_m`` [m] optional), as written
        by ``IonVelocityProfile.to_frame``.
    bands : PosteriorBands or DataFrame, optional
        Ion-velocity bands (``PosteriorBands.ion_velocity``: ``label``,
        ``z_m``, ``median``, ``lower_<level>``, ``upper_<level>``, ``map``).
    best : mapping of label to DataFrame, optional
        Best-fit curves (``z_m``, ``ion_velocity_m_s``), e.g. from
        :func:`best_fit_from_trials`; default the bands' ``map`` column.
    paths : path or paths, optional
        Where to save (``.png``, ``.svg``, ...).
    n_columns : int, default=3

    Returns
    -------
    matplotlib.figure.Figure
    """
    frames = _data_frames(dataset)
    band_frame = getattr(bands, "ion_velocity", bands)
    labels = list(frames)
    if not labels and band_frame is not None:
        labels = list(dict.fromkeys(band_frame["label"]))
    if not labels:
        raise InputDataError("plot_fit: no ion-velocity data or bands to plot.")
    ncol = max(1, min(int(n_columns), len(labels)))
    nrow = math.ceil(len(labels) / ncol)
    with _style.style():
        fig = _style.new_figure(3.4 * ncol, 2.7 * nrow)
        axes = np.atleast_1d(fig.subplots(nrow, ncol, squeeze=False, sharey=True)).ravel()
        for ax, label in zip(axes, labels, strict=False):
            title = frames.get(label, (None, label))[1]
            if band_frame is not None and len(band_frame):
                b = band_frame[band_frame["label"] == label]
                if len(b):
                    z = 1e3 * b["z_m"].to_numpy()
                    for i, lev in enumerate(_style.band_levels(b.columns)):
                        fill = _style.BAND_FILLS[min(len(_style.BAND_FILLS) - 1,
                                                     len(_style.band_levels(b.columns)) - 1 - i)]
                        ax.fill_between(z, 1e-3 * b[f"lower_{lev:g}"], 1e-3 * b[f"upper_{lev:g}"],
                                        color=fill, lw=0, label=_style.level_label(lev))
                    ax.plot(z, 1e-3 * b["median"], color=_style.MEDIAN, ls="--", lw=1.0,
                            label="posterior median")
                    if best is None and "map" in b and np.isfinite(b["map"]).any():
                        ax.plot(z, 1e-3 * b["map"], color=_style.BEST, ls="-", lw=1.6,
                                label="best fit (MAP)")
            if best is not None and label in best:
                c = best[label]
                ax.plot(1e3 * np.asarray(c["z_m"]), 1e-3 * np.asarray(c["ion_velocity_m_s"]),
                        color=_style.BEST, ls="-", lw=1.6, label="best fit")
            if label in frames:
                d = frames[label][0]
                xerr = 1e3 * d["sigma_z_m"] if "sigma_z_m" in d else None
                ax.errorbar(1e3 * d["z_m"], 1e-3 * d["ion_velocity_m_s"],
                            yerr=1e-3 * d["sigma_ion_velocity_m_s"],
                            xerr=xerr, fmt="o", ms=3.5, mfc="white", mec=_style.INK,
                            ecolor=_style.INK, elinewidth=0.8, capsize=1.5, label="measured")
            ax.set_title(title)
            ax.set_xlabel("axial position z [mm]")
            ax.set_ylabel("ion velocity [km/s]")
        for ax in axes[len(labels):]:
            ax.set_visible(False)
        handles, names = axes[0].get_legend_handles_labels()
        if handles:
            fig.legend(handles, names, loc="outside lower center", ncol=min(len(handles), 5))
    _style.save(fig, paths)
    return fig
