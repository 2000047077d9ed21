"""A shape family from a user's Python callable and named bounds."""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

from ..exceptions import InputDataError
from ..profile import ProfileKind
from ._base import Parameter, ShapeFamily
from ._xp import to_backend

__all__ = ["CustomFamily"]


class CustomFamily(ShapeFamily):
    """A family defined by a callable.

    Parameters
    ----------
    function : callable
        ``function(coefficients, z_m) -> values`` with ``coefficients`` of
        shape (d,) in physical units (in the order of ``parameters``) and
        ``z_m`` of shape (n_z,) [m]; returns finite values > 0 of shape
        (n_z,): Bohm-like coefficients or frequencies [1/s] per ``kind``. If
        ``vectorized``, it receives (n, d) coefficients and returns (n, n_z).
    parameters : mapping of name to (lower, upper), or sequence of Parameter
        Named bounds. Search levels in log10: name such parameters
        ``log10_*`` and take ``10**value`` inside ``function``.
    kind : {"bohm", "frequency"}, default="bohm"
    name : str, default="custom"
    units : mapping of name to unit, optional
    vectorized : bool, default=False

    Notes
    -----
    Process pools pickle the family; a lambda or local function cannot be
    pickled by the standard library, so define ``function`` at module level
    for process pools (dask's cloudpickle handles either).
    """

    def __init__(
        self,
        function: Callable[[np.ndarray, np.ndarray], np.ndarray],
        parameters: Mapping[str, tuple[float, float]] | Sequence[Parameter],
        kind: ProfileKind = "bohm",
        name: str = "custom",
        units: Mapping[str, str] | None = None,
        vectorized: bool = False,
    ) -> None:
        if not callable(function):
            raise InputDataError(f"custom family {name!r}: function must be callable.")
        if kind not in ("bohm", "frequency"):
            raise InputDataError(
                f"custom family {name!r}: kind must be 'bohm' or 'frequency'; got {kind!r}."
            )
        self.name = name
        self.kind = kind
        self.function = function
        self.vectorized = bool(vectorized)
        units = dict(units or {})
        if isinstance(parameters, Mapping):
            params = []
            for key, value in parameters.items():
                try:
                    lo, hi = (float(v) for v in value)
                except (TypeError, ValueError):
                    raise InputDataError(
                        f"custom family {name!r}: bounds of {key!r} must be (lower, upper); "
                        f"got {value!r}."
                    ) from None
                params.append(Parameter(key, lo, hi, units.get(key, "-")))
        else:
            params = list(parameters)
        super().__init__(params)

    def _values(self, c: Any, z: Any, xp: Any) -> Any:
        c_np = c.detach().cpu().numpy() if xp.is_torch else c
        z_np = z.detach().cpu().numpy() if xp.is_torch else z
        if self.vectorized:
            out = np.asarray(self.function(c_np, z_np), dtype=float)
        else:
            out = np.stack([np.asarray(self.function(row, z_np), dtype=float) for row in c_np])
        if out.shape != (c_np.shape[0], z_np.shape[0]):
            raise InputDataError(
                f"custom family {self.name!r}: function returned shape {out.shape}; expected "
                f"{(z_np.shape[0],)} per coefficient vector."
            )
        if not np.all(np.isfinite(out)) or np.any(out <= 0):
            raise InputDataError(
                f"custom family {self.name!r}: function returned non-finite or non-positive "
                "values; a profile must be finite and > 0 everywhere."
            )
        return to_backend(out, c)

    def _log10_values(self, c: Any, z: Any, xp: Any) -> Any:  # pragma: no cover - unused
        raise NotImplementedError
