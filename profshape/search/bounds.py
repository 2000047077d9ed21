"""Best-fit coefficients on a bound of the search range: found, reported, warned about.

A best fit within 1 % of the range of a bound (unit-cube distance below
:data:`BOUND_FRACTION`) may lie beyond it: the search does not stop early
(target or patience) while its best trial sits there, and at the end
:func:`warn_on_bounds` raises a :class:`~profshape.exceptions.BoundWarning`
that names each such coefficient, the side and the bound to widen. The hits
are also returned with the search result (``SearchResult.on_bounds``) for
the summary.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

from ..exceptions import BoundWarning

__all__ = ["BOUND_FRACTION", "BoundHit", "bound_hits", "bound_message", "warn_on_bounds"]

#: Unit-cube distance to a bound below which a coefficient counts as "on" it.
BOUND_FRACTION = 0.01


@dataclass(frozen=True)
class BoundHit:
    """A coefficient of the best fit on a bound.

    Attributes
    ----------
    name : str
        Coefficient name.
    side : {"lower", "upper"}
    value : float
        Best-fit value (physical units).
    bound : float
        The bound it sits on (physical units).
    unit_distance : float
        Distance to the bound in the unit cube (0 on it).
    """

    name: str
    side: str
    value: float
    bound: float
    unit_distance: float

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return asdict(self)


def bound_hits(u: Sequence[float] | np.ndarray, names: Sequence[str], bounds: np.ndarray,
               fraction: float = BOUND_FRACTION) -> list[BoundHit]:
    """Coefficients of the unit-cube point ``u`` within ``fraction`` of a bound.

    Parameters
    ----------
    u : array_like of shape (d,)
        Unit-cube coordinates (of the best trial).
    names : sequence of str
    bounds : ndarray of shape (d, 2)
        Physical bounds.
    fraction : float, default=0.01
    """
    u = np.asarray(u, dtype=float).reshape(-1)
    b = np.asarray(bounds, dtype=float).reshape(-1, 2)
    hits = []
    for j, name in enumerate(names):
        lo, hi = b[j]
        value = float(lo + u[j] * (hi - lo))
        if u[j] <= fraction:
            hits.append(BoundHit(str(name), "lower", value, float(lo), float(max(u[j], 0.0))))
        elif u[j] >= 1.0 - fraction:
            hits.append(BoundHit(str(name), "upper", value, float(hi),
                                 float(max(1.0 - u[j], 0.0))))
    return hits


def bound_message(hits: Sequence[BoundHit]) -> str:
    """One sentence per hit: which bound to widen."""
    parts = []
    for h in hits:
        way = "lower it" if h.side == "lower" else "raise it"
        parts.append(f"{h.name} = {h.value:.6g} is on its {h.side} bound {h.bound:.6g} "
                     f"({100 * h.unit_distance:.2g} % of the range away); {way} and search again")
    return ("the best fit sits on a bound of the search range, so the best fit may lie "
            "beyond it: " + "; ".join(parts) + ".")


def warn_on_bounds(hits: Sequence[BoundHit], stacklevel: int = 2) -> None:
    """Raise a :class:`BoundWarning` naming every hit (nothing when there is none)."""
    if hits:
        warnings.warn(bound_message(hits), BoundWarning, stacklevel=stacklevel + 1)
