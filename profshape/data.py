"""Measured data: ion-velocity profiles, scalar observables and operating points.

File formats
------------
A data set is a folder of up to three tables, each as CSV (``.csv``) or
parquet (``.parquet``), with these columns (units in the names):

``operating_points``
    ``label``, ``discharge_voltage_V``, ``anode_mass_flow_kg_s``,
    ``propellant``, ``magnetic_field_scale``; optionally ``background_pressure_Pa``
    (facility background pressure [Pa], default 0: space) and
    ``background_temperature_K`` (default 300 K).
``ion_velocity``
    ``label``, ``z_m`` (axial position from the anode [m]),
    ``ion_velocity_m_s`` [m/s], ``sigma_ion_velocity_m_s`` (1-sigma [m/s]),
    optionally ``sigma_z_m`` (1-sigma position uncertainty [m]).
``profiles``
    Long form of any profile observable along z (see
    :data:`profshape.observables.PROFILE_UNITS`): ``label``, ``observable``
    (``plasma_potential`` [V], ``electron_temperature`` [eV],
    ``plasma_density`` [m^-3], or ``ion_velocity`` [m/s]), ``z_m`` [m],
    ``value`` (SI unit of the observable), ``sigma`` (1-sigma, same unit),
    optionally ``sigma_z_m`` [m]. Ion velocity may be given here or in the
    ``ion_velocity`` table, not in both for the same point.
``scalars``
    ``label``, ``name`` (e.g. ``discharge_current``, ``thrust``), ``value``,
    ``sigma`` (1-sigma), ``unit`` (SI: ``A``, ``N``, ...).

A single point's ion-velocity file (as named by a calibration file) has the
``ion_velocity`` columns without ``label``.

Every problem is reported as an :class:`~profshape.exceptions.InputDataError`
naming the file, the (1-based) data row and the column; nothing is dropped
silently. Unsorted positions are sorted with a warning; duplicates are refused.
"""

from __future__ import annotations

import difflib
import math
import re
import warnings
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .exceptions import InputDataError, ProfshapeWarning
from .observables import SCALAR_UNITS
from .operating_point import OperatingPoint

__all__ = [
    "SCALAR_UNITS",
    "DataSet",
    "IonVelocityProfile",
    "OperatingPointData",
    "ProfileMeasurement",
    "ScalarObservable",
    "load_dataset",
    "read_ion_velocity_table",
]


_VELOCITY_COLUMNS = ("z_m", "ion_velocity_m_s", "sigma_ion_velocity_m_s")
_OPTIONAL_VELOCITY_COLUMNS = ("sigma_z_m",)
_POINT_COLUMNS = ("label", "discharge_voltage_V", "anode_mass_flow_kg_s", "propellant",
                  "magnetic_field_scale")
_OPTIONAL_POINT_COLUMNS = ("background_pressure_Pa", "background_temperature_K")
_SCALAR_COLUMNS = ("label", "name", "value", "sigma", "unit")
_PROFILE_COLUMNS = ("label", "observable", "z_m", "value", "sigma")
_OPTIONAL_PROFILE_COLUMNS = ("sigma_z_m",)

#: Largest plausible axial position [m]; larger values are most likely millimetres.
_MAX_PLAUSIBLE_Z_M = 1.0
#: Ion velocities below this magnitude everywhere [m/s] look like km/s.
_MIN_PLAUSIBLE_PEAK_VELOCITY_M_S = 100.0


def _where(source: str, row: int | None = None, column: str | None = None) -> str:
    parts = [source or "ion-velocity data"]
    if row is not None:
        parts.append(f"row {row}")
    if column is not None:
        parts.append(f"column {column!r}")
    return ", ".join(parts)


@dataclass(frozen=True, eq=False)
class IonVelocityProfile:
    """Axial ion-velocity measurements (e.g. from LIF) at one operating point.

    Parameters
    ----------
    z_m : array_like of shape (n,)
        Axial positions [m] from the anode.
    velocity_m_s : array_like of shape (n,)
        Measured mean axial ion velocity [m/s].
    sigma_m_s : array_like of shape (n,)
        1-sigma velocity uncertainty [m/s], > 0.
    sigma_z_m : array_like of shape (n,), optional
        1-sigma position uncertainty [m], >= 0.
    source : str, default=""
        Where the data came from (file name), used in messages.
    rows : sequence of int, optional
        1-based data rows in ``source`` of each point, used in messages.

    Raises
    ------
    InputDataError
        Empty, non-finite, sigma <= 0, duplicate positions, positions that look
        like millimetres, velocities that look like km/s.

    Warns
    -----
    ProfshapeWarning
        When unsorted positions are sorted.
    """

    z_m: np.ndarray
    velocity_m_s: np.ndarray
    sigma_m_s: np.ndarray
    sigma_z_m: np.ndarray | None = None
    source: str = ""
    rows: tuple[int, ...] | None = field(default=None, repr=False)

    def __post_init__(self) -> None:
        cols = {"z_m": self.z_m, "ion_velocity_m_s": self.velocity_m_s,
                "sigma_ion_velocity_m_s": self.sigma_m_s}
        if self.sigma_z_m is not None:
            cols["sigma_z_m"] = self.sigma_z_m
        arrays: dict[str, np.ndarray] = {}
        for name, value in cols.items():
            try:
                a = np.asarray(value, dtype=float)
            except (TypeError, ValueError):
                raise InputDataError(
                    f"{_where(self.source, column=name)}: values must be numbers."
                ) from None
            if a.ndim != 1:
                raise InputDataError(
                    f"{_where(self.source, column=name)}: expected a 1-D array; got shape {a.shape}."
                )
            arrays[name] = a
        n = arrays["z_m"].size
        if n == 0:
            raise InputDataError(f"{_where(self.source)}: no ion-velocity points (empty set).")
        for name, a in arrays.items():
            if a.size != n:
                raise InputDataError(
                    f"{_where(self.source, column=name)}: has {a.size} values but z_m has {n}."
                )
        rows = tuple(self.rows) if self.rows is not None else tuple(range(1, n + 1))
        for name, a in arrays.items():
            bad = np.flatnonzero(~np.isfinite(a))
            if bad.size:
                i = bad[0]
                raise InputDataError(
                    f"{_where(self.source, rows[i], name)}: value {float(a[i])!r} is not finite; "
                    "give a number (missing measurements must be removed, not left blank)."
                )
        for name in ("sigma_ion_velocity_m_s",):
            bad = np.flatnonzero(arrays[name] <= 0)
            if bad.size:
                i = bad[0]
                raise InputDataError(
                    f"{_where(self.source, rows[i], name)}: uncertainty must be > 0; got "
                    f"{float(arrays[name][i])!r} ({bad.size} value(s) <= 0 at rows "
                    f"{[rows[j] for j in bad[:10]]})."
                )
        if "sigma_z_m" in arrays:
            bad = np.flatnonzero(arrays["sigma_z_m"] < 0)
            if bad.size:
                i = bad[0]
                raise InputDataError(
                    f"{_where(self.source, rows[i], 'sigma_z_m')}: position uncertainty must "
                    f"be >= 0; got {float(arrays['sigma_z_m'][i])!r}."
                )
        z = arrays["z_m"]
        if np.max(np.abs(z)) > _MAX_PLAUSIBLE_Z_M:
            i = int(np.argmax(np.abs(z)))
            raise InputDataError(
                f"{_where(self.source, rows[i], 'z_m')}: position {float(z[i])!r} looks like "
                "millimetres; positions must be in metres (divide by 1000)."
            )
        if "sigma_z_m" in arrays and np.max(arrays["sigma_z_m"]) > 0.1:
            i = int(np.argmax(arrays["sigma_z_m"]))
            raise InputDataError(
                f"{_where(self.source, rows[i], 'sigma_z_m')}: position uncertainty "
                f"{float(arrays['sigma_z_m'][i])!r} looks like millimetres; give it in metres."
            )
        v = arrays["ion_velocity_m_s"]
        if np.max(np.abs(v)) < _MIN_PLAUSIBLE_PEAK_VELOCITY_M_S:
            raise InputDataError(
                f"{_where(self.source, column='ion_velocity_m_s')}: all velocities are below "
                f"{_MIN_PLAUSIBLE_PEAK_VELOCITY_M_S} m/s in magnitude, which looks like km/s; "
                "velocities must be in m/s (multiply by 1000)."
            )
        order = np.argsort(z, kind="stable")
        zs = z[order]
        dup = np.flatnonzero(np.diff(zs) == 0)
        if dup.size:
            i, j = order[dup[0]], order[dup[0] + 1]
            raise InputDataError(
                f"{_where(self.source, rows[j], 'z_m')}: position {float(z[j])!r} m repeats row "
                f"{rows[i]}; combine repeated measurements into one point or remove one."
            )
        if np.any(order != np.arange(n)):
            warnings.warn(
                f"{_where(self.source)}: positions were not in increasing order; sorted them.",
                ProfshapeWarning,
                stacklevel=3,
            )
            arrays = {k: a[order] for k, a in arrays.items()}
            rows = tuple(rows[i] for i in order)
        for name, attr in (("z_m", "z_m"), ("ion_velocity_m_s", "velocity_m_s"),
                           ("sigma_ion_velocity_m_s", "sigma_m_s"), ("sigma_z_m", "sigma_z_m")):
            if name in arrays:
                arrays[name].setflags(write=False)
                object.__setattr__(self, attr, arrays[name])
        object.__setattr__(self, "rows", rows)

    def __len__(self) -> int:
        return int(self.z_m.size)

    def check_domain(self, z_min_m: float, z_max_m: float) -> None:
        """Raise if a position lies outside the model domain [z_min_m, z_max_m] [m]."""
        outside = np.flatnonzero((self.z_m < z_min_m) | (self.z_m > z_max_m))
        if outside.size:
            i = int(outside[0])
            row = self.rows[i] if self.rows is not None else None
            raise InputDataError(
                f"{_where(self.source, row, 'z_m')}: position {float(self.z_m[i])!r} m is "
                f"outside the model domain [{z_min_m!r}, {z_max_m!r}] m ({outside.size} "
                "point(s)); remove those points or extend the model domain."
            )

    def to_frame(self) -> pd.DataFrame:
        """The profile as a table with the documented column names."""
        data: dict[str, Any] = {
            "z_m": self.z_m,
            "ion_velocity_m_s": self.velocity_m_s,
            "sigma_ion_velocity_m_s": self.sigma_m_s,
        }
        if self.sigma_z_m is not None:
            data["sigma_z_m"] = self.sigma_z_m
        return pd.DataFrame(data)


@dataclass(frozen=True, eq=False)
class ProfileMeasurement:
    """Measurements of one profile observable along z at one operating point.

    Parameters
    ----------
    observable : str
        A name of :data:`profshape.observables.PROFILE_UNITS` other than
        ``ion_velocity`` (which has :class:`IonVelocityProfile`).
    z_m : array_like of shape (n,)
        Axial positions [m] from the anode.
    value : array_like of shape (n,)
        Measured values in the observable's SI unit.
    sigma : array_like of shape (n,)
        1-sigma uncertainty, > 0, same unit.
    sigma_z_m : array_like of shape (n,), optional
        1-sigma position uncertainty [m], >= 0.
    source : str, default=""
        Where the data came from (file name), used in messages.
    rows : sequence of int, optional
        1-based data rows in ``source``, used in messages.

    Raises
    ------
    InputDataError
        Unknown observable (with the closest known name), empty, non-finite,
        sigma <= 0, duplicate positions, positions that look like millimetres,
        negative temperatures or densities.
    """

    observable: str
    z_m: np.ndarray
    value: np.ndarray
    sigma: np.ndarray
    sigma_z_m: np.ndarray | None = None
    source: str = ""
    rows: tuple[int, ...] | None = field(default=None, repr=False)

    def __post_init__(self) -> None:
        from .observables import PROFILE_UNITS, unknown_profile_message

        name = str(self.observable).strip()
        src = self.source or "profile data"
        first = self.rows[0] if self.rows else None
        if name not in PROFILE_UNITS or name == "ion_velocity":
            why = ("ion velocity has its own type (IonVelocityProfile)" if name == "ion_velocity"
                   else unknown_profile_message(name))
            raise InputDataError(f"{_where(src, first, 'observable')}: {why}; rename it.")
        object.__setattr__(self, "observable", name)
        cols: dict[str, Any] = {"z_m": self.z_m, "value": self.value, "sigma": self.sigma}
        if self.sigma_z_m is not None:
            cols["sigma_z_m"] = self.sigma_z_m
        arrays: dict[str, np.ndarray] = {}
        for col, raw in cols.items():
            try:
                a = np.asarray(raw, dtype=float).ravel()
            except (TypeError, ValueError):
                raise InputDataError(f"{_where(src, column=col)}: values must be numbers.") from None
            arrays[col] = a
        n = arrays["z_m"].size
        if n == 0:
            raise InputDataError(f"{_where(src)}: no {name} points (empty set).")
        rows = tuple(self.rows) if self.rows is not None else tuple(range(1, n + 1))
        for col, a in arrays.items():
            if a.size != n:
                raise InputDataError(f"{_where(src, column=col)}: has {a.size} values but z_m has {n}.")
            bad = np.flatnonzero(~np.isfinite(a))
            if bad.size:
                i = bad[0]
                raise InputDataError(f"{_where(src, rows[i], col)}: value {float(a[i])!r} is not "
                                     "finite; give a number (remove missing measurements).")
        checks = [("sigma", arrays["sigma"] <= 0, "uncertainty must be > 0")]
        if "sigma_z_m" in arrays:
            checks.append(("sigma_z_m", arrays["sigma_z_m"] < 0, "position uncertainty must be >= 0"))
        if name in ("electron_temperature", "plasma_density"):
            checks.append(("value", arrays["value"] < 0, f"{name} must be >= 0"))
        for col, bad_mask, what in checks:
            bad = np.flatnonzero(bad_mask)
            if bad.size:
                i = bad[0]
                raise InputDataError(f"{_where(src, rows[i], col)}: {what}; got "
                                     f"{float(arrays[col][i])!r} ({name}).")
        z = arrays["z_m"]
        if np.max(np.abs(z)) > _MAX_PLAUSIBLE_Z_M:
            i = int(np.argmax(np.abs(z)))
            raise InputDataError(f"{_where(src, rows[i], 'z_m')}: position {float(z[i])!r} looks "
                                 "like millimetres; positions must be in metres (divide by 1000).")
        order = np.argsort(z, kind="stable")
        dup = np.flatnonzero(np.diff(z[order]) == 0)
        if dup.size:
            i, j = order[dup[0]], order[dup[0] + 1]
            raise InputDataError(f"{_where(src, rows[j], 'z_m')}: {name} at position "
                                 f"{float(z[j])!r} m repeats row {rows[i]}; keep one.")
        arrays = {k: a[order] for k, a in arrays.items()}
        for col, attr in (("z_m", "z_m"), ("value", "value"), ("sigma", "sigma"),
                          ("sigma_z_m", "sigma_z_m")):
            if col in arrays:
                arrays[col].setflags(write=False)
                object.__setattr__(self, attr, arrays[col])
        object.__setattr__(self, "rows", tuple(rows[i] for i in order))

    def __len__(self) -> int:
        return int(self.z_m.size)

    @property
    def unit(self) -> str:
        """SI unit of the observable."""
        from .observables import PROFILE_UNITS

        return PROFILE_UNITS[self.observable]

    def to_frame(self) -> pd.DataFrame:
        """Long-form rows: ``observable``, ``z_m``, ``value``, ``sigma`` (``sigma_z_m``)."""
        data: dict[str, Any] = {"observable": self.observable, "z_m": self.z_m,
                                "value": self.value, "sigma": self.sigma}
        if self.sigma_z_m is not None:
            data["sigma_z_m"] = self.sigma_z_m
        return pd.DataFrame(data)


@dataclass(frozen=True)
class ScalarObservable:
    """A measured scalar, such as the discharge current.

    Parameters
    ----------
    name : str
        Observable name; names in :data:`SCALAR_UNITS` match the built-in
        solver's outputs (``discharge_current`` [A], ``thrust`` [N], ...).
    value : float
        Measured value in SI units.
    sigma : float
        1-sigma uncertainty, > 0, same unit.
    unit : str, optional
        SI unit; defaults to the one in :data:`SCALAR_UNITS`. A known name with
        a different unit is refused.
    """

    name: str
    value: float
    sigma: float
    unit: str = ""

    def __post_init__(self) -> None:
        name = str(self.name).strip()
        if not name or not name.replace("_", "").isalnum():
            raise InputDataError(
                f"scalar observable: name must be a word (letters, digits, _); got {self.name!r}."
            )
        object.__setattr__(self, "name", name)
        for attr in ("value", "sigma"):
            raw = getattr(self, attr)
            try:
                v = float(raw)
            except (TypeError, ValueError):
                raise InputDataError(f"scalar {name!r}: {attr} must be a number; got {raw!r}.") from None
            if not math.isfinite(v):
                raise InputDataError(f"scalar {name!r}: {attr} must be finite; got {raw!r}.")
            object.__setattr__(self, attr, v)
        if self.sigma <= 0:
            raise InputDataError(f"scalar {name!r}: sigma must be > 0; got {self.sigma!r}.")
        expected = SCALAR_UNITS.get(name)
        unit = str(self.unit).strip()
        if expected is not None:
            if unit and unit != expected:
                raise InputDataError(
                    f"scalar {name!r}: unit must be {expected!r} (SI); got {unit!r}. "
                    "Convert the value (e.g. mN to N: divide by 1000)."
                )
            unit = expected
        object.__setattr__(self, "unit", unit or "-")


@dataclass(frozen=True)
class OperatingPointData:
    """One operating point with its measurements.

    Parameters
    ----------
    point : OperatingPoint
    ion_velocity : IonVelocityProfile, optional
    scalars : mapping of name to ScalarObservable, optional
    profiles : mapping of observable name to ProfileMeasurement, optional
        Profile observables other than the ion velocity (plasma potential, ...).
    """

    point: OperatingPoint
    ion_velocity: IonVelocityProfile | None = None
    scalars: Mapping[str, ScalarObservable] = field(default_factory=dict)
    profiles: Mapping[str, ProfileMeasurement] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if not isinstance(self.point, OperatingPoint):
            raise InputDataError(
                f"OperatingPointData.point must be an OperatingPoint; got {type(self.point).__name__}."
            )
        scalars = dict(self.scalars)
        for key, obs in scalars.items():
            if not isinstance(obs, ScalarObservable) or obs.name != key:
                raise InputDataError(
                    f"operating point {self.point.label!r}: scalars must map each name to a "
                    f"ScalarObservable of that name; got {key!r} → {obs!r}."
                )
        object.__setattr__(self, "scalars", scalars)
        profiles = dict(self.profiles)
        for key, meas in profiles.items():
            if not isinstance(meas, ProfileMeasurement) or meas.observable != key:
                raise InputDataError(
                    f"operating point {self.point.label!r}: profiles must map each observable to "
                    f"a ProfileMeasurement of that observable; got {key!r} → {meas!r}."
                )
        object.__setattr__(self, "profiles", profiles)
        if self.ion_velocity is None and not scalars and not profiles:
            raise InputDataError(
                f"operating point {self.point.label!r} has no measurements; give an ion-velocity "
                "profile, another profile or at least one scalar observable."
            )

    @property
    def label(self) -> str:
        """The operating point's label."""
        return self.point.label

    @property
    def n_data(self) -> int:
        """Number of measured values at this point."""
        n = len(self.ion_velocity) if self.ion_velocity is not None else 0
        return n + len(self.scalars) + sum(len(m) for m in self.profiles.values())


class DataSet(Sequence[OperatingPointData]):
    """One or several operating points, each with its measurements.

    Parameters
    ----------
    points : sequence of OperatingPointData
        Non-empty, unique labels.
    """

    def __init__(self, points: Sequence[OperatingPointData]) -> None:
        pts = list(points)
        if not pts:
            raise InputDataError("data set is empty: give at least one operating point.")
        labels = [p.label for p in pts]
        dup = sorted({lab for lab in labels if labels.count(lab) > 1})
        if dup:
            raise InputDataError(f"data set: operating-point labels must be unique; repeated {dup}.")
        self._points = pts

    def __getitem__(self, key: int | str) -> OperatingPointData:  # type: ignore[override]
        if isinstance(key, str):
            for p in self._points:
                if p.label == key:
                    return p
            raise KeyError(f"no operating point labelled {key!r}; labels: {self.labels}")
        return self._points[key]

    def __len__(self) -> int:
        return len(self._points)

    def __iter__(self) -> Iterator[OperatingPointData]:
        return iter(self._points)

    def __repr__(self) -> str:
        return f"DataSet(labels={self.labels!r}, n_data={self.n_data})"

    @property
    def labels(self) -> list[str]:
        """Operating-point labels, in order."""
        return [p.label for p in self._points]

    @property
    def operating_points(self) -> list[OperatingPoint]:
        """The operating points, in order."""
        return [p.point for p in self._points]

    @property
    def n_data(self) -> int:
        """Total number of measured values."""
        return sum(p.n_data for p in self._points)

    def check_domain(self, z_min_m: float, z_max_m: float) -> None:
        """Raise if any ion-velocity position is outside [z_min_m, z_max_m] [m]."""
        for p in self._points:
            if p.ion_velocity is not None:
                p.ion_velocity.check_domain(z_min_m, z_max_m)
            for meas in p.profiles.values():
                out = np.flatnonzero((meas.z_m < z_min_m) | (meas.z_m > z_max_m))
                if out.size:
                    i = out[0]
                    row = meas.rows[i] if meas.rows is not None else None
                    raise InputDataError(
                        f"{_where(meas.source, row, 'z_m')}: "
                        f"{meas.observable} position {float(meas.z_m[i])!r} m is outside the model "
                        f"domain [{z_min_m!r}, {z_max_m!r}] m; remove it or extend the domain.")

    # ------------------------------------------------------------------ tables
    def tables(self) -> dict[str, pd.DataFrame]:
        """The documented tables: operating_points, ion_velocity, scalars, profiles."""
        ops = pd.DataFrame([p.point.to_dict() for p in self._points],
                           columns=[*_POINT_COLUMNS, *_OPTIONAL_POINT_COLUMNS])
        vel = [p.ion_velocity.to_frame().assign(label=p.label) for p in self._points
               if p.ion_velocity is not None]
        vel_df = (pd.concat(vel, ignore_index=True) if vel
                  else pd.DataFrame(columns=["label", *_VELOCITY_COLUMNS]))
        vel_df = vel_df[["label", *[c for c in vel_df.columns if c != "label"]]]
        sca = pd.DataFrame(
            [{"label": p.label, "name": s.name, "value": s.value, "sigma": s.sigma, "unit": s.unit}
             for p in self._points for s in p.scalars.values()],
            columns=list(_SCALAR_COLUMNS),
        )
        prof = [m.to_frame().assign(label=p.label) for p in self._points
                for m in p.profiles.values()]
        prof_df = (pd.concat(prof, ignore_index=True) if prof
                   else pd.DataFrame(columns=list(_PROFILE_COLUMNS)))
        prof_df = prof_df[["label", *[c for c in prof_df.columns if c != "label"]]]
        return {"operating_points": ops, "ion_velocity": vel_df, "scalars": sca,
                "profiles": prof_df}

    def save(self, folder: str | Path, format: str = "csv") -> dict[str, Path]:
        """Write the tables into ``folder`` as CSV or parquet; returns the paths.

        Parameters
        ----------
        folder : path
            Created if missing.
        format : {"csv", "parquet"}, default="csv"
        """
        if format not in ("csv", "parquet"):
            raise InputDataError(f"format must be 'csv' or 'parquet'; got {format!r}.")
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        paths = {}
        for name, df in self.tables().items():
            if df.empty and name != "operating_points":
                continue  # an empty table would be refused on reading: leave it out
            path = folder / f"{name}.{format}"
            if format == "csv":
                df.to_csv(path, index=False)
            else:
                df.to_parquet(path, index=False)
            paths[name] = path
        return paths


# ---------------------------------------------------------------------- reading
def _read_table(path: Path) -> pd.DataFrame:
    if not path.exists():
        raise InputDataError(f"{path}: file not found.")
    try:
        if path.suffix.lower() == ".parquet":
            df = pd.read_parquet(path)
        elif path.suffix.lower() == ".csv":
            df = pd.read_csv(path, skipinitialspace=True, comment="#")
        else:
            raise InputDataError(f"{path}: unknown file type {path.suffix!r}; use .csv or .parquet.")
    except pd.errors.EmptyDataError:
        raise InputDataError(f"{path}: file is empty; expected a header row and data.") from None
    except (pd.errors.ParserError, UnicodeDecodeError, OSError) as exc:
        raise InputDataError(f"{path}: cannot be read as a table: {exc}".strip()) from None
    except InputDataError:
        raise
    except Exception as exc:  # pyarrow raises its own types for corrupt files
        raise InputDataError(f"{path}: cannot be read: {type(exc).__name__}: {exc}") from None
    df.columns = [str(c).strip() for c in df.columns]
    return df


def _check_columns(df: pd.DataFrame, path: Path | str, required: Sequence[str],
                   optional: Sequence[str] = ()) -> None:
    cols = list(df.columns)
    missing = [c for c in required if c not in cols]
    unknown = [c for c in cols if c not in required and c not in optional]
    hint = ""
    if any(re.search(r"(^|_)mm($|_)", c.lower()) for c in cols):
        hint = " A column name mentions millimetres: give positions in metres (z_m)."
    if missing:
        raise InputDataError(
            f"{path}: missing column(s) {missing}; expected {list(required)}"
            + (f" (optional {list(optional)})" if optional else "")
            + f", found {cols}.{hint}"
        )
    if unknown:
        near = difflib.get_close_matches(unknown[0], [*required, *optional], n=1, cutoff=0.6)
        guess = f" (did you mean {near[0]!r} for {unknown[0]!r}?)" if near else ""
        raise InputDataError(
            f"{path}: unknown column(s) {unknown}{guess}; expected {list(required)}"
            + (f" (optional {list(optional)})" if optional else "")
            + f".{hint} Remove or rename them (nothing is dropped silently)."
        )
    if df.empty:
        raise InputDataError(f"{path}: no data rows (empty set).")


def _numeric(df: pd.DataFrame, column: str, path: Path | str) -> np.ndarray:
    values = pd.to_numeric(df[column], errors="coerce")
    bad = values.isna() & df[column].notna()
    if bad.any():
        i = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputDataError(
            f"{path}, row {i + 1}, column {column!r}: {df[column].iloc[i]!r} is not a number."
        )
    return values.to_numpy(dtype=float)


def _velocity_from_frame(df: pd.DataFrame, source: str, rows: Sequence[int]) -> IonVelocityProfile:
    sigma_z = _numeric(df, "sigma_z_m", source) if "sigma_z_m" in df.columns else None
    if sigma_z is not None and np.all(np.isnan(sigma_z)):
        sigma_z = None  # a point without position uncertainties in a long table
    return IonVelocityProfile(
        z_m=_numeric(df, "z_m", source),
        velocity_m_s=_numeric(df, "ion_velocity_m_s", source),
        sigma_m_s=_numeric(df, "sigma_ion_velocity_m_s", source),
        sigma_z_m=sigma_z,
        source=source,
        rows=tuple(rows),
    )


def read_ion_velocity_table(path: str | Path) -> IonVelocityProfile:
    """Read one operating point's ion-velocity file (CSV or parquet).

    Columns: ``z_m``, ``ion_velocity_m_s``, ``sigma_ion_velocity_m_s`` and
    optionally ``sigma_z_m`` (see the module docstring).
    """
    path = Path(path)
    df = _read_table(path)
    _check_columns(df, path, _VELOCITY_COLUMNS, _OPTIONAL_VELOCITY_COLUMNS)
    return _velocity_from_frame(df, str(path), range(1, len(df) + 1))


def _find(folder: Path, stem: str) -> Path | None:
    found = [p for p in (folder / f"{stem}.csv", folder / f"{stem}.parquet") if p.exists()]
    if len(found) > 1:
        raise InputDataError(
            f"{folder}: both {stem}.csv and {stem}.parquet are present; which one holds the data "
            "is ambiguous. Keep one of them (move the other out of the folder)."
        )
    if not found:  # a near miss of the table's name is a typo, not an absent table
        others = [p.stem for p in folder.iterdir() if p.suffix.lower() in (".csv", ".parquet")]
        near = difflib.get_close_matches(stem, others, n=1, cutoff=0.8)
        if near:
            raise InputDataError(
                f"{folder}: no {stem}.csv or {stem}.parquet, but there is {near[0]!r} (did you "
                f"mean {stem!r}?); rename it, or move it out of the folder."
            )
    return found[0] if found else None


def _read_profiles(path: Path, points: Mapping[str, OperatingPoint],
                   velocities: dict[str, IonVelocityProfile],
                   profiles: dict[str, dict[str, ProfileMeasurement]]) -> None:
    """Read the long-form ``profiles`` table into ``velocities`` and ``profiles``."""
    from .observables import PROFILE_UNITS, unknown_profile_message

    df = _read_table(path)
    _check_columns(df, path, _PROFILE_COLUMNS, _OPTIONAL_PROFILE_COLUMNS)
    df["label"] = df["label"].astype(str).str.strip()
    df["observable"] = df["observable"].astype(str).str.strip()
    for i, (label, name) in enumerate(zip(df["label"], df["observable"], strict=True), start=1):
        if label not in points:
            raise InputDataError(f"{path}, row {i}, column 'label': {label!r} is not an operating "
                                 f"point (known: {list(points)}).")
        if name not in PROFILE_UNITS:
            raise InputDataError(f"{path}, row {i}, column 'observable': "
                                 f"{unknown_profile_message(name)}; rename it.")
    for (label, name), group in df.groupby(["label", "observable"], sort=False):
        rows = tuple(int(r) + 1 for r in group.index)
        sigma_z = _numeric(group, "sigma_z_m", path) if "sigma_z_m" in group.columns else None
        if sigma_z is not None and np.all(np.isnan(sigma_z)):
            sigma_z = None
        if name == "ion_velocity":
            if label in velocities:
                raise InputDataError(
                    f"{path}, row {rows[0]}, column 'observable': ion velocity of {label!r} is "
                    "also in the ion_velocity table; give it in one table only.")
            velocities[str(label)] = IonVelocityProfile(
                _numeric(group, "z_m", path), _numeric(group, "value", path),
                _numeric(group, "sigma", path), sigma_z, source=str(path), rows=rows)
        else:
            profiles[str(label)][str(name)] = ProfileMeasurement(
                str(name), _numeric(group, "z_m", path), _numeric(group, "value", path),
                _numeric(group, "sigma", path), sigma_z, source=str(path), rows=rows)


def load_dataset(folder: str | Path) -> DataSet:
    """Load a data set folder (see the module docstring for the tables).

    Parameters
    ----------
    folder : path
        Holds ``operating_points`` and at least one of ``ion_velocity``,
        ``profiles`` and ``scalars``, each as ``.csv`` or ``.parquet``.

    Raises
    ------
    InputDataError
        Naming the file, row and column of the first problem found.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputDataError(f"{folder}: data set folder not found.")
    op_path = _find(folder, "operating_points")
    if op_path is None:
        raise InputDataError(
            f"{folder}: no operating_points.csv or operating_points.parquet; every data set "
            "needs its operating points."
        )
    ops = _read_table(op_path)
    _check_columns(ops, op_path, _POINT_COLUMNS, _OPTIONAL_POINT_COLUMNS)
    points: dict[str, OperatingPoint] = {}
    for i, row in enumerate(ops.to_dict("records"), start=1):
        try:
            p = OperatingPoint(
                label=str(row["label"]),
                discharge_voltage_V=row["discharge_voltage_V"],
                anode_mass_flow_kg_s=row["anode_mass_flow_kg_s"],
                propellant=str(row["propellant"]),
                magnetic_field_scale=row["magnetic_field_scale"],
                **{c: row[c] for c in _OPTIONAL_POINT_COLUMNS if c in row and pd.notna(row[c])},
            )
        except InputDataError as exc:
            raise InputDataError(f"{op_path}, row {i}: {exc}") from None
        if p.label in points:
            raise InputDataError(f"{op_path}, row {i}, column 'label': label {p.label!r} repeats.")
        points[p.label] = p

    velocities: dict[str, IonVelocityProfile] = {}
    vel_path = _find(folder, "ion_velocity")
    if vel_path is not None:
        vel = _read_table(vel_path)
        _check_columns(vel, vel_path, ("label", *_VELOCITY_COLUMNS), _OPTIONAL_VELOCITY_COLUMNS)
        vel["label"] = vel["label"].astype(str).str.strip()
        for key, group in vel.groupby("label", sort=False):
            label = str(key)
            if label not in points:
                first = int(group.index[0]) + 1
                raise InputDataError(
                    f"{vel_path}, row {first}, column 'label': {label!r} is not an operating point "
                    f"in {op_path.name} (known: {list(points)})."
                )
            velocities[label] = _velocity_from_frame(group, str(vel_path),
                                                     [int(i) + 1 for i in group.index])

    scalars: dict[str, dict[str, ScalarObservable]] = {lab: {} for lab in points}
    sca_path = _find(folder, "scalars")
    if sca_path is not None:
        sca = _read_table(sca_path)
        _check_columns(sca, sca_path, _SCALAR_COLUMNS)
        for i, row in enumerate(sca.to_dict("records"), start=1):
            label = str(row["label"]).strip()
            if label not in points:
                raise InputDataError(
                    f"{sca_path}, row {i}, column 'label': {label!r} is not an operating point "
                    f"(known: {list(points)})."
                )
            unit = "" if pd.isna(row["unit"]) else str(row["unit"])
            try:
                obs = ScalarObservable(str(row["name"]), row["value"], row["sigma"], unit)
            except InputDataError as exc:
                raise InputDataError(f"{sca_path}, row {i}: {exc}") from None
            if obs.name in scalars[label]:
                raise InputDataError(
                    f"{sca_path}, row {i}, column 'name': {obs.name!r} repeats for {label!r}."
                )
            scalars[label][obs.name] = obs
    profiles: dict[str, dict[str, ProfileMeasurement]] = {lab: {} for lab in points}
    prof_path = _find(folder, "profiles")
    if prof_path is not None:
        _read_profiles(prof_path, points, velocities, profiles)
    if vel_path is None and sca_path is None and prof_path is None:
        raise InputDataError(
            f"{folder}: no measurements; add ion_velocity.csv, profiles.csv and/or scalars.csv."
        )
    try:
        return DataSet([
            OperatingPointData(points[lab], velocities.get(lab), scalars[lab], profiles[lab])
            for lab in points
        ])
    except InputDataError as exc:
        raise InputDataError(f"{folder}: {exc}") from None
