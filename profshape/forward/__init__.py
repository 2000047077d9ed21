"""Forward models: the built-in solver, any Python callable, or an external program."""

from __future__ import annotations

from .base import STATUSES, ForwardModel, Prediction

__all__ = ["STATUSES", "ForwardModel", "Prediction"]
