"""The forward-model protocol: a profile and an operating point in, predictions out."""

from __future__ import annotations

import math
import time
import traceback
from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..operating_point import OperatingPoint
from ..profile import AnomalousProfile

__all__ = ["STATUSES", "ForwardModel", "Prediction"]

#: Trial statuses: a forward run either succeeds or fails in one of these ways.
STATUSES = ("ok", "failed", "timeout", "not_converged")


def _finite_array(name: str, value: Any) -> tuple[np.ndarray | None, str]:
    if value is None:
        return None, ""
    try:
        a = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        return None, f"{name} is not numeric"
    if a.ndim != 1:
        return None, f"{name} must be 1-D; got shape {a.shape}"
    if not np.all(np.isfinite(a)):
        n_bad = int(np.sum(~np.isfinite(a)))
        return None, f"{name} has {n_bad} non-finite value(s) (NaN or inf)"
    return a, ""


@dataclass(frozen=True, eq=False)
class Prediction:
    """What a forward model predicts at one operating point, or why it could not.

    Parameters
    ----------
    status : {"ok", "failed", "timeout", "not_converged"}
    z_m : ndarray of shape (n,), optional
        Axial positions [m] of the predicted ion velocity, increasing.
    ion_velocity_m_s : ndarray of shape (n,), optional
        Predicted mean axial ion velocity [m/s].
    scalars : dict of str to float
        Predicted scalar outputs in SI units (``discharge_current`` [A],
        ``thrust`` [N], ...; see :data:`profshape.data.SCALAR_UNITS`).
    reason : str
        Why the run failed (empty when ok); may carry a note when ok.
    fields : dict of str to ndarray
        Optional per-cell outputs on the model grid (e.g. ``potential``).
    wall_time_s : float
        Wall time of the run [s].
    profiles : dict of str to ndarray
        Predicted profile observables other than the ion velocity
        (``plasma_potential`` [V], ``electron_temperature`` [eV],
        ``plasma_density`` [m^-3]; see :data:`profshape.observables.PROFILE_UNITS`),
        each on the ``z_m`` grid.

    Notes
    -----
    A prediction with status ``"ok"`` is guaranteed finite: non-finite or
    mis-shaped values turn it into a ``"failed"`` one whose reason says why.
    """

    status: str
    z_m: np.ndarray | None = None
    ion_velocity_m_s: np.ndarray | None = None
    scalars: dict[str, float] = field(default_factory=dict)
    reason: str = ""
    fields: dict[str, np.ndarray] = field(default_factory=dict)
    wall_time_s: float = 0.0
    profiles: dict[str, np.ndarray] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if self.status not in STATUSES:
            object.__setattr__(self, "reason", f"unknown status {self.status!r}; {self.reason}")
            object.__setattr__(self, "status", "failed")
        if self.status != "ok":
            return
        problems = []
        z, msg = _finite_array("z_m", self.z_m)
        problems += [msg] if msg else []
        v, msg = _finite_array("ion_velocity_m_s", self.ion_velocity_m_s)
        problems += [msg] if msg else []
        if z is not None and v is not None:
            if z.shape != v.shape:
                problems.append(f"z_m has {z.size} values but ion_velocity_m_s has {v.size}")
            elif z.size < 2:
                problems.append("ion velocity needs at least 2 positions")
            elif np.any(np.diff(z) <= 0):
                problems.append("z_m must be strictly increasing")
        elif (z is None) != (v is None) and not problems:
            problems.append("z_m and ion_velocity_m_s must be given together")
        profiles: dict[str, np.ndarray] = {}
        for key, raw in dict(self.profiles).items():
            arr, msg = _finite_array(f"profile {key!r}", raw)
            if msg:
                problems.append(msg)
            elif arr is not None:
                if z is None or arr.shape != z.shape:
                    problems.append(f"profile {key!r} has {arr.size} values but z_m has "
                                    f"{0 if z is None else z.size}")
                profiles[str(key)] = arr
        scalars: dict[str, float] = {}
        for key, value in dict(self.scalars).items():
            try:
                f = float(value)
            except (TypeError, ValueError):
                problems.append(f"scalar {key!r} is not a number ({value!r})")
                continue
            if not math.isfinite(f):
                problems.append(f"scalar {key!r} is {f}")
            scalars[str(key)] = f
        if problems:
            object.__setattr__(self, "status", "failed")
            object.__setattr__(self, "reason", "invalid prediction: " + "; ".join(problems))
            return
        object.__setattr__(self, "z_m", z)
        object.__setattr__(self, "ion_velocity_m_s", v)
        object.__setattr__(self, "scalars", scalars)
        object.__setattr__(self, "profiles", profiles)

    def profile(self, observable: str) -> np.ndarray | None:
        """Predicted values of a profile observable on ``z_m`` (``ion_velocity`` included),
        or ``None`` when the model gave none."""
        if observable == "ion_velocity":
            return self.ion_velocity_m_s
        return self.profiles.get(observable)

    @property
    def ok(self) -> bool:
        """True when the run succeeded and the values are usable."""
        return self.status == "ok"

    @classmethod
    def failure(cls, status: str, reason: str, wall_time_s: float = 0.0) -> Prediction:
        """A failed prediction with a reason."""
        if status == "ok":
            status = "failed"
        return cls(status=status, reason=str(reason), wall_time_s=wall_time_s)

    def to_json_dict(self) -> dict[str, Any]:
        """JSON-ready form (for the trial log): z, ion velocity, other profiles and scalars."""
        out: dict[str, Any] = {
            "status": self.status,
            "z_m": None if self.z_m is None else self.z_m.tolist(),
            "ion_velocity_m_s": None if self.ion_velocity_m_s is None
            else self.ion_velocity_m_s.tolist(),
            "scalars": dict(self.scalars),
            "reason": self.reason,
        }
        if self.profiles:
            out["profiles"] = {k: v.tolist() for k, v in self.profiles.items()}
        return out

    @classmethod
    def from_json_dict(cls, d: dict[str, Any]) -> Prediction:
        """The prediction of :meth:`to_json_dict` (a trial log's ``predictions`` cell)."""
        return cls(d.get("status", "failed"),
                   None if d.get("z_m") is None else np.asarray(d["z_m"], dtype=float),
                   None if d.get("ion_velocity_m_s") is None
                   else np.asarray(d["ion_velocity_m_s"], dtype=float),
                   dict(d.get("scalars") or {}), str(d.get("reason", "")),
                   profiles={k: np.asarray(v, dtype=float)
                             for k, v in dict(d.get("profiles") or {}).items()})


class ForwardModel(ABC):
    """Base class of forward models.

    Subclasses implement :meth:`run`; calling the model (``model(profile,
    point)``) wraps :meth:`run` so that any exception becomes a ``"failed"``
    :class:`Prediction` whose reason ends with the traceback's last lines,
    and the wall time is recorded. Models must be picklable to run on a
    process pool or a dask cluster.

    Attributes
    ----------
    name : str
        Short identifier of the model.
    version : str
        Version of the model (part of the cache key).
    """

    name: str = "forward-model"
    version: str = "0"

    @abstractmethod
    def run(self, profile: AnomalousProfile, point: OperatingPoint) -> Prediction:
        """Run the model for one profile at one operating point."""

    def grid(self, point: OperatingPoint) -> np.ndarray | None:
        """The model's axial grid [m] for ``point``, if it has one."""
        return None

    def cache_key(self) -> str:
        """Identity of the model and its settings, for the result cache."""
        return f"{type(self).__module__}.{type(self).__qualname__}:{self.name}:{self.version}"

    def __call__(self, profile: AnomalousProfile, point: OperatingPoint) -> Prediction:
        start = time.perf_counter()
        try:
            result = self.run(profile, point)
        except (Exception, SystemExit) as exc:  # a failed trial, never a crash of the campaign
            tail = "".join(traceback.format_exception(exc)[-3:]).strip()
            return Prediction.failure(
                "failed", f"{type(exc).__name__}: {exc} | {tail[-600:]}",
                wall_time_s=time.perf_counter() - start,
            )
        if not isinstance(result, Prediction):
            return Prediction.failure(
                "failed",
                f"forward model {self.name!r} returned {type(result).__name__}, not a Prediction",
                wall_time_s=time.perf_counter() - start,
            )
        if result.wall_time_s == 0.0:
            object.__setattr__(result, "wall_time_s", time.perf_counter() - start)
        return result
