"""Export the calibrated closure for other codes: CSV, JSON and netCDF.

``profshape export RUN`` (or :func:`export_closure`) writes, for every
operating point of a finished calibration, along the axial position z [m]:

- the Bohm-like anomalous coefficient [-] (the anomalous collision frequency
  divided by the local electron cyclotron frequency e B / m_e),
- the anomalous collision frequency [1/s],

each as the best trial's profile (``best``) and, when the run has a
posterior, the posterior median and the central credible bands
(``lower_<level>``, ``upper_<level>``), together with the magnetic field B [T]
the conversion used (the device's field times the point's
``magnetic_field_scale``) and the operating point (discharge voltage [V],
anode mass flow [kg/s], propellant, field scale).

Quantiles convert exactly between the two quantities: at each z the factor
e B / m_e is a positive constant, and a quantile of a positive multiple is
that multiple of the quantile. Without a magnetic field (an external forward
model and no ``[device]`` table) only the family's own quantity is exported,
and the files say so.

Formats
-------
``closure.csv``
    One row per (point, z): ``label``, the operating point columns, ``z_m``,
    ``magnetic_field_T``, ``bohm_coefficient__<stat>``,
    ``collision_frequency_hz__<stat>``. Reload exactly with
    ``pandas.read_csv(path, float_precision="round_trip")`` (or
    :func:`read_closure_csv`).
``closure.json``
    ``{"attributes": {...}, "points": [{"label", "operating_point", "z_m",
    "magnetic_field_T", "bohm_coefficient": {stat: [...]},
    "collision_frequency_hz": {stat: [...]}}]}``.
``closure.nc``
    An :class:`xarray.Dataset` (netCDF3 64-bit offset, written by scipy, so no
    HDF5 library is needed) with dimensions ``point`` and ``z_m``, one
    variable per quantity and statistic, ``units`` and ``long_name`` on every
    variable and provenance in the global attributes. Reload with
    ``xarray.open_dataset(path)``.
"""

from __future__ import annotations

import json
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._version import __version__
from ..exceptions import InputDataError
from ..profile import electron_gyrofrequency

__all__ = [
    "EXPORT_FORMATS",
    "closure_dataset",
    "closure_frame",
    "export_closure",
    "read_closure_csv",
]

EXPORT_FORMATS = ("csv", "json", "nc")
EXPORT_DIR = "export"
_BOHM = "bohm_coefficient"
_FREQ = "collision_frequency_hz"
_LONG = {
    _BOHM: ("Bohm-like anomalous coefficient (anomalous collision frequency / (e B / m_e))", "1"),
    _FREQ: ("anomalous electron collision frequency", "s-1"),
}
_POINT_COLUMNS = ("discharge_voltage_V", "anode_mass_flow_kg_s", "propellant",
                  "magnetic_field_scale")
_POINT_UNITS = {"discharge_voltage_V": "V", "anode_mass_flow_kg_s": "kg s-1",
                "magnetic_field_scale": "1", "propellant": ""}


def _calibration(run: Path) -> Any:
    from .build import build_calibration
    from .folder import config_from_folder

    return build_calibration(config_from_folder(run), run, progress=False)


def _best_row(trials: pd.DataFrame) -> pd.Series:
    ok = trials[(trials["status"] == "ok") & np.isfinite(pd.to_numeric(trials["reduced_chi2"],
                                                                        errors="coerce"))]
    if ok.empty:
        raise InputDataError("export: the run has no successful trial; nothing to export.")
    row: pd.Series = ok.loc[ok["reduced_chi2"].idxmin()]
    return row


def _grid(cal: Any, bands: pd.DataFrame | None) -> np.ndarray:
    if bands is not None and len(bands):
        first = bands["label"].iloc[0]
        z: np.ndarray = bands.loc[bands["label"] == first, "z_m"].to_numpy(dtype=float)
        return z
    if cal.device is not None:
        return np.linspace(0.0, float(cal.device.domain_length_m), 200)
    zs = [p.ion_velocity.z_m for p in cal.problem.dataset if p.ion_velocity is not None]
    if not zs:
        raise InputDataError("export: no device and no ion-velocity positions to place the grid; "
                             "give a [device] table in the calibration file.")
    return np.linspace(0.0, 1.1 * float(max(np.max(z) for z in zs)), 200)


def closure_frame(run: str | Path, cal: Any = None) -> tuple[pd.DataFrame, dict[str, Any]]:
    """The closure of a calibration folder as a long table, and its attributes.

    Parameters
    ----------
    run : path-like
        Output folder of ``profshape calibrate`` / ``demo``.
    cal : Calibration, optional
        Already built from that folder (saves rebuilding it).

    Returns
    -------
    frame : DataFrame
        One row per (operating point, z); see the module docstring for columns.
    attributes : dict
        Provenance: run folder, title, family, coefficients, best trial and its
        reduced chi-square, band levels, profshape version, time of export.

    Raises
    ------
    InputDataError
        If ``run`` is not a calibration folder or has no successful trial.
    """
    from ..trials import read_trials
    from .layout import BANDS_DIR, BANDS_PROFILE_FILE, RUN_FILE, TRIALS_FILE

    run = Path(run)
    if not (run / TRIALS_FILE).exists():
        raise InputDataError(f"export: {run} has no trials.parquet; give the output folder of a "
                             "calibration (`profshape calibrate` or `profshape demo`).")
    cal = cal if cal is not None else _calibration(run)
    problem = cal.problem
    trials = read_trials(run / TRIALS_FILE)
    row = _best_row(trials)
    best_c = np.array([float(row[n]) for n in problem.names])
    band_path = run / BANDS_DIR / BANDS_PROFILE_FILE
    bands = pd.read_parquet(band_path) if band_path.exists() else None
    z = _grid(cal, bands)
    field = getattr(cal.device, "magnetic_field", None)
    levels = sorted({float(c.split("_", 1)[1]) for c in (bands.columns if bands is not None else [])
                     if c.startswith("lower_")})
    stats = ["median"] + [f"{side}_{lev:g}" for lev in levels for side in ("lower", "upper")] \
        if bands is not None else []
    frames = []
    for point in problem.dataset.operating_points:
        own = problem.profile_for(best_c, point.label)(z)
        own_kind = problem.family.kind  # "bohm" or "frequency"
        if bands is not None:
            b = bands[bands["label"] == point.label]
            if len(b) != len(z) or not np.array_equal(b["z_m"].to_numpy(dtype=float), z):
                raise InputDataError(f"export: the profile bands of {point.label!r} are on another "
                                     "grid than the first point's; re-run the bands.")
            quantity = str(b["quantity"].iloc[0])
            banded = {s: b[s].to_numpy(dtype=float) for s in stats}
        out = pd.DataFrame({"label": point.label, "z_m": z})
        for col in _POINT_COLUMNS:
            out[col] = getattr(point, col)
        if callable(field):
            b_T = np.asarray(field(z), dtype=float) * float(point.magnetic_field_scale)
            omega = electron_gyrofrequency(b_T)
            if not np.all(omega > 0):
                raise InputDataError(f"export: the magnetic field at {point.label!r} is zero "
                                     "somewhere on the grid; the Bohm-like coefficient is undefined "
                                     "there.")
            out["magnetic_field_T"] = b_T
            bohm = {"best": own if own_kind == "bohm" else own / omega}
            freq = {"best": own * omega if own_kind == "bohm" else own}
            if bands is not None:
                for s, v in banded.items():
                    bohm[s] = v if quantity == "bohm_coefficient" else v / omega
                    freq[s] = v * omega if quantity == "bohm_coefficient" else v
            blocks = {_BOHM: bohm, _FREQ: freq}
        else:
            own_q = _BOHM if own_kind == "bohm" else _FREQ
            block = {"best": own}
            if bands is not None:
                block.update(banded)
            blocks = {own_q: block}
        for q, block in blocks.items():
            for s, v in block.items():
                out[f"{q}__{s}"] = np.asarray(v, dtype=float)
        frames.append(out)
    frame = pd.concat(frames, ignore_index=True)
    numeric = frame.select_dtypes("number")
    bad = [c for c in numeric.columns if not np.isfinite(numeric[c].to_numpy(dtype=float)).all()]
    if bad:
        raise InputDataError(f"export: non-finite values in {bad} of {run}; the run's band files "
                             "are damaged: rebuild them with `profshape resume` (no new trials).")
    info = json.loads((run / RUN_FILE).read_text(encoding="utf-8")) if (run / RUN_FILE).exists() \
        else {}
    attributes: dict[str, Any] = {
        "title": str(cal.config.data.get("title") or ""),
        "source_run": str(run.resolve()),
        "calibration_fingerprint": str(info.get("fingerprint", "")),
        "shape_family": problem.family.name,
        "coefficient_names": list(problem.names),
        "best_trial": int(row["trial"]),
        "best_reduced_chi2": float(row["reduced_chi2"]),
        "best_coefficients": {n: float(v) for n, v in zip(problem.names, best_c, strict=True)},
        "band_levels": levels,
        "statistics": ["best", *stats],
        "statistics_note": ("best: profile of the best trial; median, lower_<level>, upper_<level>: "
                            "pointwise posterior median and central credible band"),
        "magnetic_field": ("device field times the operating point's magnetic_field_scale"
                           if callable(field) else
                           "none (no [device]); only the family's own quantity is exported"),
        "z_origin": "anode",
        "profshape_version": __version__,
        "created": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
    }
    return frame, attributes


def closure_dataset(frame: pd.DataFrame, attributes: dict[str, Any]) -> Any:
    """The closure as an :class:`xarray.Dataset` (dims ``point``, ``z_m``) with units."""
    import xarray as xr

    labels = list(dict.fromkeys(frame["label"]))
    first = frame[frame["label"] == labels[0]]
    z = first["z_m"].to_numpy(dtype=float)
    data_vars: dict[str, Any] = {}
    value_cols = [c for c in frame.columns if "__" in c or c == "magnetic_field_T"]
    for col in value_cols:
        arr = np.vstack([frame.loc[frame["label"] == lab, col].to_numpy(dtype=float)
                         for lab in labels])
        if col == "magnetic_field_T":
            attrs = {"units": "T", "long_name": "magnetic field used for the conversion"}
        else:
            q, stat = col.split("__", 1)
            long_name, unit = _LONG[q]
            attrs = {"units": unit, "long_name": f"{long_name}, {stat}", "statistic": stat}
        data_vars[col] = (("point", "z_m"), arr, attrs)
    for col in _POINT_COLUMNS:
        vals = [frame.loc[frame["label"] == lab, col].iloc[0] for lab in labels]
        arr = np.array(vals, dtype=str if col == "propellant" else float)
        data_vars[col] = (("point",), arr, {"units": _POINT_UNITS[col]} if _POINT_UNITS[col] else {})
    ds = xr.Dataset(
        data_vars,
        coords={"point": ("point", np.array(labels, dtype=str), {"long_name": "operating point label"}),
                "z_m": ("z_m", z, {"units": "m", "long_name": "axial position from the anode"})},
    )
    ds.attrs = {k: (json.dumps(v) if isinstance(v, (dict, list)) else v)
                for k, v in attributes.items()}
    ds.attrs["conventions_note"] = "list and dict attributes are JSON text"
    return ds


def read_closure_csv(path: str | Path) -> pd.DataFrame:
    """Read ``closure.csv`` back exactly (round-trip float parsing)."""
    if int(pd.__version__.split(".")[0]) >= 3:  # round-trip exact by default
        return pd.read_csv(path)
    return pd.read_csv(path, float_precision="round_trip")


def export_closure(
    run: str | Path,
    out: str | Path | None = None,
    formats: Sequence[str] = EXPORT_FORMATS,
) -> dict[str, Path]:
    """Write the calibrated closure of ``run`` as CSV, JSON and/or netCDF.

    Parameters
    ----------
    run : path-like
        A calibration output folder.
    out : path-like, optional
        Folder to write into (default ``RUN/export``); created if needed.
    formats : sequence of {"csv", "json", "nc"}
        Which files to write.

    Returns
    -------
    dict of format to Path
        The files written (``closure.csv``, ``closure.json``, ``closure.nc``).

    Raises
    ------
    InputDataError
        Unknown format, not a calibration folder, or no successful trial.
    """
    from ..atomic_write import atomic_write_bytes

    formats = [str(f).lower().lstrip(".") for f in formats]
    unknown = [f for f in formats if f not in EXPORT_FORMATS]
    if unknown or not formats:
        raise InputDataError(f"export: formats must be among {list(EXPORT_FORMATS)}; got "
                             f"{list(formats)!r}.")
    run = Path(run)
    folder = Path(out) if out is not None else run / EXPORT_DIR
    frame, attributes = closure_frame(run)
    folder.mkdir(parents=True, exist_ok=True)
    written: dict[str, Path] = {}
    if "csv" in formats:
        path = folder / "closure.csv"
        atomic_write_bytes(path, lambda tmp: frame.to_csv(tmp, index=False))
        written["csv"] = path
    if "json" in formats:
        path = folder / "closure.json"
        text = json.dumps(_json_document(frame, attributes), indent=1, allow_nan=False)
        atomic_write_bytes(path, lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))
        written["json"] = path
    if "nc" in formats:
        path = folder / "closure.nc"
        ds = closure_dataset(frame, attributes)
        atomic_write_bytes(path, lambda tmp: ds.to_netcdf(tmp, engine="scipy",
                                                          format="NETCDF3_64BIT"))
        written["nc"] = path
    return written


def _json_document(frame: pd.DataFrame, attributes: dict[str, Any]) -> dict[str, Any]:
    points = []
    for label in dict.fromkeys(frame["label"]):
        f = frame[frame["label"] == label]
        entry: dict[str, Any] = {
            "label": str(label),
            "operating_point": {c: (str(f[c].iloc[0]) if c == "propellant" else float(f[c].iloc[0]))
                                for c in _POINT_COLUMNS},
            "z_m": f["z_m"].astype(float).tolist(),
        }
        if "magnetic_field_T" in f:
            entry["magnetic_field_T"] = f["magnetic_field_T"].astype(float).tolist()
        for q in (_BOHM, _FREQ):
            cols = [c for c in f.columns if c.startswith(q + "__")]
            if cols:
                entry[q] = {c.split("__", 1)[1]: f[c].astype(float).tolist() for c in cols}
        points.append(entry)
    units = {"z_m": "m", "magnetic_field_T": "T", _BOHM: "1", _FREQ: "1/s",
             "discharge_voltage_V": "V", "anode_mass_flow_kg_s": "kg/s"}
    return {"attributes": {**attributes, "units": units}, "points": points}

