"""Forward models: the built-in solver, any Python callable, or an external program.

- :class:`ForwardModel` and :class:`Prediction`: the protocol (:mod:`.base`).
- :class:`BuiltinSolverModel`: the built-in 1-D discharge solver.
- :class:`CallableModel`: any Python function.
- :class:`ExternalModel`: an external program through files in a work folder.
- :class:`CachedModel`: an on-disk result cache around any of them.
"""

from __future__ import annotations

from .base import STATUSES, ForwardModel, Prediction
from .builtin import BuiltinSolverModel
from .cache import CachedModel
from .callable import CallableModel
from .external import ExternalModel

__all__ = [
    "STATUSES",
    "BuiltinSolverModel",
    "CachedModel",
    "CallableModel",
    "ExternalModel",
    "ForwardModel",
    "Prediction",
]
