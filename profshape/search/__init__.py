"""Bayesian-optimisation search over shape coefficients.

The names below are imported on first use (PEP 562), so that importing
``profshape.search.settings`` (as the calibration file's checks do) does not load
torch and botorch.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from ..lazy_exports import lazy_exports

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

__getattr__, __dir__ = lazy_exports(__name__, _WHERE, __all__, globals())
