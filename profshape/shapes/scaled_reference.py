"""One scale factor on a user-given reference profile (today's common practice)."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from ..exceptions import InputDataError
from ..profile import ProfileKind
from ._base import Parameter, ShapeFamily
from ._xp import to_backend

__all__ = ["ScaledReference"]


class ScaledReference(ShapeFamily):
    """A reference profile times a single factor: ``c(z) = 10**s * ref(z)``.

    This is the usual hand calibration (fix the shape, fit the scale), kept as
    the baseline that richer families must beat.

    Parameters
    ----------
    reference : callable or (z_m, values) pair
        The reference profile: a function of z [m] returning positive values,
        or tabulated positions [m] (strictly increasing) and positive values,
        interpolated linearly in log10 and held constant beyond the ends.
    kind : {"bohm", "frequency"}, default="bohm"
        What the reference values are.
    scale_bounds_log10 : (float, float), default=(-2.0, 2.0)
        Bounds of ``log10_scale``.
    """

    name = "scaled_reference"

    def __init__(
        self,
        reference: Callable[[np.ndarray], np.ndarray] | tuple[Any, Any],
        kind: ProfileKind = "bohm",
        scale_bounds_log10: tuple[float, float] = (-2.0, 2.0),
    ) -> None:
        self.kind = kind
        if callable(reference):
            self._ref_callable: Callable[[np.ndarray], np.ndarray] | None = reference
            self._ref_z = self._ref_log = None
        else:
            try:
                z_ref, v_ref = (np.asarray(a, dtype=float) for a in reference)
            except (TypeError, ValueError):
                raise InputDataError(
                    "scaled_reference: reference must be a callable or a (z_m, values) pair "
                    f"of numeric arrays; got {type(reference).__name__}."
                ) from None
            if z_ref.ndim != 1 or z_ref.shape != v_ref.shape or z_ref.size < 2:
                raise InputDataError(
                    "scaled_reference: reference z_m and values must be 1-D of equal length "
                    f">= 2; got shapes {z_ref.shape} and {v_ref.shape}."
                )
            if not (np.all(np.isfinite(z_ref)) and np.all(np.isfinite(v_ref))):
                raise InputDataError("scaled_reference: reference contains NaN or inf.")
            if np.any(np.diff(z_ref) <= 0):
                raise InputDataError("scaled_reference: reference z_m must be strictly increasing.")
            if np.any(v_ref <= 0):
                i = int(np.argmax(v_ref <= 0))
                raise InputDataError(
                    f"scaled_reference: reference values must be > 0; got {float(v_ref[i])!r} at index {i}."
                )
            self._ref_callable = None
            self._ref_z, self._ref_log = z_ref, np.log10(v_ref)
        super().__init__([
            Parameter("log10_scale", *scale_bounds_log10, "log10(-)",
                      "log10 of the factor on the reference profile"),
        ])

    def reference(self, z_m: np.ndarray) -> np.ndarray:
        """The unscaled reference profile at ``z_m`` [m]."""
        z = np.asarray(z_m, dtype=float)
        if self._ref_callable is not None:
            v = np.asarray(self._ref_callable(z), dtype=float)
            if v.shape != z.shape or not np.all(np.isfinite(v)) or np.any(v <= 0):
                raise InputDataError(
                    "scaled_reference: the reference callable must return finite values > 0 "
                    f"of the same shape as z ({z.shape}); got shape {v.shape}."
                )
            return v
        if self._ref_z is None or self._ref_log is None:
            raise InputDataError("scaled_reference: neither a reference callable nor a table is set.")
        values: np.ndarray = 10.0 ** np.interp(z, self._ref_z, self._ref_log)
        return values

    def _log10_values(self, c: Any, z: Any, xp: Any) -> Any:
        z_np = z.detach().cpu().numpy() if xp.is_torch else z
        log_ref = to_backend(np.log10(self.reference(z_np)), c)
        return c[:, :1] + log_ref[None, :]
