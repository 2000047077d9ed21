"""The anomalous profile band along z with the best shape."""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import InputDataError
from . import _style

__all__ = ["plot_profile_band"]

_QUANTITY_LABEL = {
    "frequency_hz": "anomalous collision frequency [1/s]",
    "bohm_coefficient": "Bohm-like anomalous coefficient [-]",
}


def plot_profile_band(
    profile: Any,
    paths: str | Path | Iterable[str | Path] | None = None,
    *,
    labels: Iterable[str] | None = None,
    channel_length_m: float | None = None,
    log_scale: bool = True,
    reference: Any = None,
    magnetic_field_T: Any = None,
    points: Any = None,
) -> Any:
    """Credible band of the anomalous profile with the best (MAP) shape.

    Parameters
    ----------
    profile : PosteriorBands or DataFrame
        ``PosteriorBands.profile``: ``label``, ``quantity``, ``z_m``, ``median``,
        ``lower_<level>``, ``upper_<level>``, ``map``.
    paths : path or paths, optional
    labels : iterable of str, optional
        Operating points to draw (default all; identical profiles are drawn once).
    channel_length_m : float, optional
        Marks the channel exit with a vertical line [m].
    log_scale : bool, default=True
    reference : dict, optional
        A reference profile (``reference.json``: ``label``, ``quantity``
        ``"bohm"`` or ``"frequency"``, ``profile`` with ``z_m`` and ``value``),
        overlaid. Converted to the band's quantity with ``magnetic_field_T``
        when they differ (skipped when no field is given).
    magnetic_field_T : callable, optional
        ``B(z_m)`` [T] of the device (times each point's ``magnetic_field_scale``).
    points : mapping of label to OperatingPoint, optional
        For the field scale of each point.

    Returns
    -------
    matplotlib.figure.Figure
    """
    frame = getattr(profile, "profile", profile)
    if not isinstance(frame, pd.DataFrame) or "z_m" not in frame:
        raise InputDataError("plot_profile_band: give PosteriorBands or its profile DataFrame.")
    if "label" not in frame:
        frame = frame.assign(label="")
    chosen = list(labels) if labels is not None else list(dict.fromkeys(frame["label"]))
    # drop labels whose profile repeats an earlier one (no per-point scale)
    unique: list[str] = []
    for lab in chosen:
        m = frame.loc[frame["label"] == lab, "median"].to_numpy()
        if not any(np.allclose(m, frame.loc[frame["label"] == u, "median"].to_numpy())
                   for u in unique):
            unique.append(lab)
    levels = _style.band_levels(frame.columns)
    quantity = str(frame["quantity"].iloc[0]) if "quantity" in frame else "frequency_hz"
    with _style.style():
        fig = _style.new_figure(5.2, 3.4)
        ax = fig.subplots()
        for k, lab in enumerate(unique):
            f = frame[frame["label"] == lab]
            z = 1e3 * f["z_m"].to_numpy()
            suffix = f" ({lab})" if len(unique) > 1 else ""
            for i, lev in enumerate(levels):
                fill = _style.BAND_FILLS[min(len(_style.BAND_FILLS) - 1, len(levels) - 1 - i)]
                ax.fill_between(z, f[f"lower_{lev:g}"], f[f"upper_{lev:g}"], color=fill,
                                alpha=0.9 if len(unique) == 1 else 0.5, lw=0,
                                label=_style.level_label(lev) + suffix)
            ax.plot(z, f["median"], color=_style.MEDIAN, ls="--", lw=1.0,
                    label="posterior median" + suffix)
            if "map" in f:
                ax.plot(z, f["map"], color=_style.BEST, lw=1.6,
                        ls=_style.DASHES[k % len(_style.DASHES)], label="best shape (MAP)" + suffix)
        ref = _reference_values(reference, quantity, magnetic_field_T, points, unique)
        if ref is not None:
            ax.plot(1e3 * ref[0], ref[1], color=_style.REFERENCE, ls="-.", lw=1.4, label=ref[2])
        if channel_length_m is not None:
            ax.axvline(1e3 * channel_length_m, color=_style.INK, lw=0.8, ls=":")
            ax.annotate("channel exit", (1e3 * channel_length_m, 1.0),
                        xycoords=("data", "axes fraction"), xytext=(3, -10),
                        textcoords="offset points", fontsize=8)
        if log_scale:
            ax.set_yscale("log")
        ax.set_xlabel("axial position z [mm]")
        ax.set_ylabel(_QUANTITY_LABEL.get(quantity, quantity))
        ax.legend(loc="best")
    _style.save(fig, paths)
    return fig


def _reference_values(reference: Any, quantity: str, field: Any, points: Any, labels: list[str]
                      ) -> tuple[np.ndarray, np.ndarray, str] | None:
    """The reference profile in the band's quantity, or None if it cannot be converted."""
    from ..profile import electron_gyrofrequency
    from ..reference import reference_profile

    if not reference or not reference.get("profile"):
        return None
    z_tab = np.asarray(reference["profile"]["z_m"], dtype=float)
    z = np.linspace(float(z_tab.min()), float(z_tab.max()), 300)
    kind = str(reference.get("quantity", "bohm"))
    prof = reference_profile(z_tab, np.asarray(reference["profile"]["value"], dtype=float), kind)
    values = prof(z)
    name = str(reference.get("label") or "reference")
    want = "bohm" if quantity == "bohm_coefficient" else "frequency"
    if want == kind:
        return z, values, name
    if not callable(field):
        return None
    point = (points or {}).get(labels[0]) if labels else None
    scale = float(getattr(point, "magnetic_field_scale", 1.0))
    omega = electron_gyrofrequency(np.asarray(field(z), dtype=float) * scale)
    return z, (values * omega if want == "frequency" else values / omega), name
