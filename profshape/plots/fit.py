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

__all__ = ["best_fit_from_trials", "plot_fit", "point_title"]


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


def point_title(point: Any) -> str:
    """Panel title of an operating point: label, voltage, flow, propellant (and field scale)."""
    title = (f"{point.label}: {point.discharge_voltage_V:g} V, "
             f"{1e6 * point.anode_mass_flow_kg_s:.3g} mg/s, {point.propellant}")
    scale = float(getattr(point, "magnetic_field_scale", 1.0))
    if abs(scale - 1.0) > 1e-12:
        title += f", B x {scale:g}"
    return title


def _data_frames(dataset: Any) -> dict[str, tuple[pd.DataFrame, str]]:
    out = {}
    if isinstance(dataset, Mapping):
        for label, frame in dataset.items():
            out[str(label)] = (pd.DataFrame(frame), str(label))
        return out
    for item in dataset:
        if item.ion_velocity is None:
            continue
        out[item.label] = (item.ion_velocity.to_frame(), point_title(item.point))
    return out


def _curve(frame: Any) -> tuple[np.ndarray, np.ndarray]:
    return (np.asarray(frame["z_m"], dtype=float), np.asarray(frame["ion_velocity_m_s"], dtype=float))


def plot_fit(
    dataset: Any,
    bands: Any = None,
    best: Mapping[str, pd.DataFrame] | None = None,
    paths: str | Path | Iterable[str | Path] | None = None,
    *,
    n_columns: int = 3,
    reference: Any = None,
    residuals: bool = True,
) -> Any:
    """Data with error bars, best fit and credible bands per operating point, residuals below.

    Parameters
    ----------
    dataset : DataSet or mapping of label to DataFrame
        The measurements; DataFrames need ``z_m`` [m], ``ion_velocity_m_s`` and
        ``sigma_ion_velocity_m_s`` [m/s] (``sigma_z_m`` [m] optional, drawn as
        horizontal error bars), as written by ``IonVelocityProfile.to_frame``.
        Panel titles name the point, its voltage, flow and propellant.
    bands : PosteriorBands or DataFrame, optional
        Ion-velocity bands (``PosteriorBands.ion_velocity``: ``label``,
        ``z_m``, ``median``, ``lower_<level>``, ``upper_<level>``, ``map``).
    best : mapping of label to DataFrame, optional
        Best-fit curves (``z_m``, ``ion_velocity_m_s``), e.g. from
        :func:`best_fit_from_trials`; default the bands' ``map`` column.
    paths : path or paths, optional
        Where to save (``.png``, ``.svg``, ...).
    n_columns : int, default=3
    reference : dict or mapping of label to DataFrame, optional
        A reference profile's run (``reference.json`` as loaded by
        :func:`profshape.reference.load_reference_result`, or curves by label),
        overlaid and its residuals shown too.
    residuals : bool, default=True
        A panel under each fit with measured minus model [km/s] (error bars
        of the measurement on both axes).

    Returns
    -------
    matplotlib.figure.Figure
    """
    from ..reference import reference_curves

    frames = _data_frames(dataset)
    band_frame = getattr(bands, "ion_velocity", bands)
    labels = list(frames)
    if not labels and band_frame is not None:
        labels = list(dict.fromkeys(band_frame["label"]))
    if not labels:
        raise InputDataError("plot_fit: no ion-velocity data or bands to plot.")
    ref_name = "reference"
    if isinstance(reference, Mapping) and "predictions" in reference:
        ref_name = str(reference.get("label") or ref_name)
        reference = reference_curves(reference)
    ref_curves = dict(reference or {})
    ncol = max(1, min(int(n_columns), len(labels)))
    nrow = math.ceil(len(labels) / ncol)
    with _style.style():
        fig = _style.new_figure(3.5 * ncol, (3.6 if residuals else 2.7) * nrow)
        ratios = [3, 1.15] * nrow if residuals else [1] * nrow
        grid = fig.add_gridspec(len(ratios), ncol, height_ratios=ratios)
        main_axes: list[Any] = []
        res_axes: list[Any | None] = []
        for k in range(nrow * ncol):
            r, c = divmod(k, ncol)
            rr = 2 * r if residuals else r
            ax = fig.add_subplot(grid[rr, c], sharey=main_axes[0] if main_axes else None)
            main_axes.append(ax)
            res_axes.append(fig.add_subplot(grid[rr + 1, c], sharex=ax) if residuals else None)
        for k, label in enumerate(labels):
            ax, rax = main_axes[k], res_axes[k]
            title = frames.get(label, (None, label))[1]
            model_curve: tuple[np.ndarray, np.ndarray] | None = None
            if band_frame is not None and len(band_frame):
                b = band_frame[band_frame["label"] == label]
                if len(b):
                    z = 1e3 * b["z_m"].to_numpy()
                    levels = _style.band_levels(b.columns)
                    for i, lev in enumerate(levels):
                        fill = _style.BAND_FILLS[min(len(_style.BAND_FILLS) - 1, len(levels) - 1 - i)]
                        ax.fill_between(z, 1e-3 * b[f"lower_{lev:g}"], 1e-3 * b[f"upper_{lev:g}"],
                                        color=fill, lw=0, label=_style.level_label(lev))
                    ax.plot(z, 1e-3 * b["median"], color=_style.MEDIAN, ls="--", lw=1.0,
                            label="posterior median")
                    if best is None and "map" in b and np.isfinite(b["map"]).any():
                        ax.plot(z, 1e-3 * b["map"], color=_style.BEST, ls="-", lw=1.6,
                                label="best fit (MAP)")
                        model_curve = (b["z_m"].to_numpy(dtype=float), b["map"].to_numpy(dtype=float))
            if best is not None and label in best:
                model_curve = _curve(best[label])
                ax.plot(1e3 * model_curve[0], 1e-3 * model_curve[1], color=_style.BEST, ls="-",
                        lw=1.6, label="best fit")
            if label in ref_curves:
                zr, vr = _curve(ref_curves[label])
                ax.plot(1e3 * zr, 1e-3 * vr, color=_style.REFERENCE, ls="-.", lw=1.3, label=ref_name)
            if label in frames:
                d = frames[label][0]
                xerr = 1e3 * d["sigma_z_m"] if "sigma_z_m" in d else None
                err = {"fmt": "o", "ms": 3.5, "mfc": "white", "mec": _style.INK,
                       "ecolor": _style.INK, "elinewidth": 0.8, "capsize": 1.5}
                ax.errorbar(1e3 * d["z_m"], 1e-3 * d["ion_velocity_m_s"],
                            yerr=1e-3 * d["sigma_ion_velocity_m_s"], xerr=xerr, label="measured",
                            **err)
                if rax is not None:
                    zd = d["z_m"].to_numpy(dtype=float)
                    vd = d["ion_velocity_m_s"].to_numpy(dtype=float)
                    rax.axhline(0.0, color=_style.INK, lw=0.6)
                    if model_curve is not None:
                        res = vd - np.interp(zd, *model_curve)
                        rax.errorbar(1e3 * zd, 1e-3 * res, yerr=1e-3 * d["sigma_ion_velocity_m_s"],
                                     xerr=xerr, **err)
                    if label in ref_curves:
                        res_r = vd - np.interp(zd, *_curve(ref_curves[label]))
                        rax.plot(1e3 * zd, 1e-3 * res_r, ls="none", marker="^", ms=3.5,
                                 color=_style.REFERENCE, label=f"{ref_name} residual")
            ax.set_title(title)
            ax.set_ylabel("ion velocity [km/s]")
            if rax is not None:
                ax.tick_params(labelbottom=False)
                rax.set_ylabel("data − model\n[km/s]")
                rax.set_xlabel("axial position z [mm]")
                rax.grid(True)
            else:
                ax.set_xlabel("axial position z [mm]")
        for k in range(len(labels), nrow * ncol):
            main_axes[k].set_visible(False)
            rax_k = res_axes[k]
            if rax_k is not None:
                rax_k.set_visible(False)
        handles, names = main_axes[0].get_legend_handles_labels()
        if handles:
            fig.legend(handles, names, loc="outside lower center", ncol=min(len(handles), 5))
    _style.save(fig, paths)
    return fig
