"""Gaussian well (or bump) in log10 space on a constant baseline."""

from __future__ import annotations

from typing import Any

from ..profile import ProfileKind
from ._base import Parameter, ShapeFamily

__all__ = ["LogWell"]


class LogWell(ShapeFamily):
    r"""A log-space well: a constant baseline with a Gaussian dip (or bump).

    .. math::

        \log_{10} c(z) = b - d \, \exp\!\left[-\tfrac12 \left(\frac{z - z_c}{w}\right)^2\right]

    A positive depth ``d`` [decades] is a well (less transport near ``z_c``,
    as is typical where the magnetic field peaks); a negative one is a bump.

    Coefficients, in order:

    - ``log10_baseline``: log10 of the level away from the well.
    - ``depth_decades``: depth of the well in decades (negative for a bump).
    - ``centre_z_m``: centre of the well [m].
    - ``width_m``: Gaussian standard deviation of the well [m].

    Parameters
    ----------
    channel_length_m : float, default=0.025
        Channel length [m]; sets the default bounds of the centre and width.
    kind : {"bohm", "frequency"}, default="bohm"
    bounds : dict, optional
        Overrides of the default bounds, name → (lower, upper).
    """

    name = "log_well"

    def __init__(
        self,
        channel_length_m: float = 0.025,
        kind: ProfileKind = "bohm",
        bounds: dict[str, tuple[float, float]] | None = None,
    ) -> None:
        L = float(channel_length_m)
        self.kind = kind
        unit = "log10(-)" if kind == "bohm" else "log10(1/s)"
        base = (-2.0, -0.5) if kind == "bohm" else (6.0, 8.0)
        super().__init__([
            Parameter("log10_baseline", *base, unit, "level away from the well"),
            Parameter("depth_decades", -0.5, 2.0, "decades", "depth of the well"),
            Parameter("centre_z_m", 0.3 * L, 1.2 * L, "m", "centre of the well"),
            Parameter("width_m", 0.05 * L, 0.6 * L, "m", "standard deviation of the well"),
        ])
        if bounds:
            self._parameters = self.with_bounds(**bounds).parameters

    def _log10_values(self, c: Any, z: Any, xp: Any) -> Any:
        b, d, zc, w = (c[:, i : i + 1] for i in range(4))
        return b - d * xp.exp(-0.5 * ((z[None, :] - zc) / w) ** 2)
