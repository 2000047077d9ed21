"""Bayesian-optimisation search over shape coefficients.

The names below are imported on first use (PEP 562), so that importing
``profshape.search.settings`` (as the calibration file's checks do) does not load
torch and botorch.
"""

from __future__ import annotations

from importlib import import_module
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from .engine import Observation, Proposal, Search
    from .loop import SearchResult, run_search
    from .settings import SearchSettings
    from .space import SearchSpace

__all__ = [
    "Observation",
    "Proposal",
    "Search",
    "SearchResult",
    "SearchSettings",
    "SearchSpace",
    "run_search",
]

_WHERE = {
    "Observation": ".engine",
    "Proposal": ".engine",
    "Search": ".engine",
    "SearchResult": ".loop",
    "run_search": ".loop",
    "SearchSettings": ".settings",
    "SearchSpace": ".space",
}


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        value = getattr(import_module(_WHERE[name], __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
