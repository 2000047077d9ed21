"""Wrap any Python callable as a forward model."""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

from ..exceptions import InputDataError
from ..operating_point import OperatingPoint
from ..profile import AnomalousProfile
from .base import STATUSES, ForwardModel, Prediction

__all__ = ["CallableModel", "as_prediction"]

_DICT_KEYS = {"status", "z_m", "ion_velocity_m_s", "scalars", "reason", "fields"}


def as_prediction(result: Any) -> Prediction:
    """Turn what a user function returned into a :class:`Prediction`.

    Accepted forms: a :class:`Prediction`; a dict with keys among ``status``,
    ``z_m`` [m], ``ion_velocity_m_s`` [m/s], ``scalars`` (dict, SI units),
    ``reason``, ``fields``; or a pair ``(z_m, ion_velocity_m_s)``. Anything
    else gives a ``"failed"`` prediction saying what arrived.
    """
    if isinstance(result, Prediction):
        return result
    if isinstance(result, Mapping):
        unknown = sorted(set(map(str, result)) - _DICT_KEYS)
        if unknown:
            return Prediction.failure(
                "failed", f"result dict has unknown keys {unknown}; allowed {sorted(_DICT_KEYS)}"
            )
        status = str(result.get("status", "ok"))
        if status not in STATUSES:
            return Prediction.failure("failed", f"result status {status!r} not in {STATUSES}")
        if status != "ok":
            return Prediction.failure(status, str(result.get("reason", "")) or status)
        scalars = result.get("scalars", {}) or {}
        if not isinstance(scalars, Mapping):
            return Prediction.failure("failed", "result 'scalars' must be a dict of floats")
        fields = result.get("fields", {}) or {}
        return Prediction(
            status="ok",
            z_m=result.get("z_m"),
            ion_velocity_m_s=result.get("ion_velocity_m_s"),
            scalars=dict(scalars),
            reason=str(result.get("reason", "")),
            fields={str(k): np.asarray(v, dtype=float) for k, v in dict(fields).items()},
        )
    if isinstance(result, Sequence) and not isinstance(result, (str, bytes)) and len(result) == 2:
        z, v = result
        return Prediction(status="ok", z_m=z, ion_velocity_m_s=v)
    if isinstance(result, np.ndarray) and result.ndim == 2 and result.shape[0] == 2:
        return Prediction(status="ok", z_m=result[0], ion_velocity_m_s=result[1])
    return Prediction.failure(
        "failed",
        f"forward function returned {type(result).__name__}; return a Prediction, a dict or a "
        "(z_m, ion_velocity_m_s) pair",
    )


class CallableModel(ForwardModel):
    """A forward model from a function ``func(profile, point) -> result``.

    Parameters
    ----------
    func : callable
        ``func(profile: AnomalousProfile, point: OperatingPoint)`` returning a
        :class:`Prediction`, a dict or a ``(z_m, ion_velocity_m_s)`` pair (see
        :func:`as_prediction`). An exception becomes a ``"failed"``
        prediction whose reason carries the exception and traceback tail.
    name : str, optional
        Model name; default the function's qualified name.
    version : str, default="0"
        Version of the function's science; change it when the function
        changes so cached results are not reused.
    grid_m : array_like, optional
        Axial grid [m] of the model, if it has one (used to check the data
        lie inside it).

    Notes
    -----
    For a process pool the function must be picklable (defined at module
    level); dask pickles closures too.

    Examples
    --------
    >>> import numpy as np
    >>> from profshape import OperatingPoint
    >>> from profshape.profile import AnomalousProfile
    >>> def model(profile, point):
    ...     z = np.linspace(0.0, 0.05, 11)
    ...     return z, 1e4 * np.tanh(z / 0.02) / (1 + profile(z))
    >>> m = CallableModel(model)
    >>> p = m(AnomalousProfile("bohm", lambda z: 0 * z + 0.01),
    ...       OperatingPoint("300V", 300.0, 5e-6))
    >>> p.status
    'ok'
    """

    def __init__(
        self,
        func: Callable[[AnomalousProfile, OperatingPoint], Any],
        name: str | None = None,
        version: str = "0",
        grid_m: np.ndarray | Sequence[float] | None = None,
    ) -> None:
        if not callable(func):
            raise InputDataError(
                f"CallableModel: func must be callable; got {type(func).__name__}."
            )
        self.func = func
        self.name = name or str(getattr(func, "__qualname__", type(func).__name__))
        self.version = str(version)
        self._grid = None if grid_m is None else np.asarray(grid_m, dtype=float)

    def run(self, profile: AnomalousProfile, point: OperatingPoint) -> Prediction:
        """Call the function and convert its result."""
        return as_prediction(self.func(profile, point))

    def grid(self, point: OperatingPoint) -> np.ndarray | None:
        """The grid given at construction, if any."""
        return self._grid

    def cache_key(self) -> str:
        """Function identity (module and qualified name), name and version."""
        mod = getattr(self.func, "__module__", "?")
        qual = getattr(self.func, "__qualname__", type(self.func).__name__)
        return f"callable:{mod}.{qual}:{self.name}:{self.version}"
