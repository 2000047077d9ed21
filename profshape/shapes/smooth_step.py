"""Two-level profile with a smooth (tanh) transition in log10 space."""

from __future__ import annotations

from typing import Any

from ..profile import ProfileKind
from ._base import Parameter, ShapeFamily

__all__ = ["SmoothStep"]


class SmoothStep(ShapeFamily):
    r"""Two levels joined by a smooth step at a movable location.

    .. math::

        \log_{10} c(z) = a_\mathrm{in} + (a_\mathrm{out} - a_\mathrm{in})\,
        \tfrac12 \left[1 + \tanh\!\left(\frac{z - z_t}{w}\right)\right]

    Coefficients, in order:

    - ``log10_inner_level``: log10 of the level near the anode (inside the channel).
    - ``log10_outer_level``: log10 of the level far downstream (near plume).
    - ``transition_z_m``: location of the step [m].
    - ``transition_width_m``: half-width of the step [m] (10 %–90 % over about 2.2 w).

    Parameters
    ----------
    channel_length_m : float, default=0.025
        Channel length [m]; sets the default bounds of the location and width.
    kind : {"bohm", "frequency"}, default="bohm"
        What the levels are: Bohm-like coefficients or frequencies [1/s].
    bounds : dict, optional
        Overrides of the default bounds, name → (lower, upper).
    """

    name = "smooth_step"

    def __init__(
        self,
        channel_length_m: float = 0.025,
        kind: ProfileKind = "bohm",
        bounds: dict[str, tuple[float, float]] | None = None,
    ) -> None:
        L = float(channel_length_m)
        self.kind = kind
        unit = "log10(-)" if kind == "bohm" else "log10(1/s)"
        lo_in, hi_in, lo_out, hi_out = (-4.0, -1.5, -2.0, 0.0) if kind == "bohm" else (
            5.0, 7.0, 6.0, 8.5)
        super().__init__([
            Parameter("log10_inner_level", lo_in, hi_in, unit, "level inside the channel"),
            Parameter("log10_outer_level", lo_out, hi_out, unit, "level in the near plume"),
            Parameter("transition_z_m", 0.6 * L, 1.6 * L, "m", "location of the transition"),
            Parameter("transition_width_m", 0.02 * L, 0.5 * L, "m", "width of the transition"),
        ])
        if bounds:
            self._parameters = self.with_bounds(**bounds).parameters

    def _log10_values(self, c: Any, z: Any, xp: Any) -> Any:
        a_in, a_out, zt, w = (c[:, i : i + 1] for i in range(4))
        step = 0.5 * (1.0 + xp.tanh((z[None, :] - zt) / w))
        return a_in + (a_out - a_in) * step
