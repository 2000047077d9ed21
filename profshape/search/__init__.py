"""Bayesian-optimisation search over shape coefficients."""

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
