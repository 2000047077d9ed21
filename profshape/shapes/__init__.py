"""Shape families: low-dimensional maps from coefficients to an anomalous profile.

Built in:

- :class:`SmoothStep` (``"smooth_step"``): two levels with a smooth transition.
- :class:`LogSpline` (``"log_spline"``): monotone-safe cubic spline in log10.
- :class:`LogWell` (``"log_well"``): a Gaussian well or bump in log10.
- :class:`ScaledReference` (``"scaled_reference"``): one factor on a reference.
- :class:`CustomFamily`: any callable with named bounds.
"""

from __future__ import annotations

from typing import Any

from ..exceptions import InputDataError
from ._base import Parameter, ShapeFamily
from .custom import CustomFamily
from .log_spline import LogSpline
from .log_well import LogWell
from .scaled_reference import ScaledReference
from .smooth_step import SmoothStep

__all__ = [
    "FAMILIES",
    "CustomFamily",
    "LogSpline",
    "LogWell",
    "Parameter",
    "ScaledReference",
    "ShapeFamily",
    "SmoothStep",
    "get_family",
]

FAMILIES: dict[str, type[ShapeFamily]] = {
    "smooth_step": SmoothStep,
    "log_spline": LogSpline,
    "log_well": LogWell,
    "scaled_reference": ScaledReference,
}


def get_family(name: str, **options: Any) -> ShapeFamily:
    """Build a built-in family by name.

    Parameters
    ----------
    name : str
        One of ``"smooth_step"``, ``"log_spline"``, ``"log_well"``,
        ``"scaled_reference"``.
    **options
        Passed to the family's constructor (e.g. ``channel_length_m``,
        ``n_nodes``, ``bounds``).

    Raises
    ------
    InputDataError
        For an unknown family or option.
    """
    key = str(name).strip().lower()
    if key not in FAMILIES:
        raise InputDataError(
            f"shape family: unknown family {name!r}; use one of {sorted(FAMILIES)} "
            "or build a CustomFamily."
        )
    try:
        return FAMILIES[key](**options)
    except TypeError as exc:
        raise InputDataError(f"shape family {key!r}: bad options {sorted(options)}: {exc}") from None
