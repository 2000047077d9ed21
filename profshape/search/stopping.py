"""Stop rules of a search: budget, target reduced chi-square, patience."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

__all__ = ["STOP_BUDGET", "STOP_PATIENCE", "STOP_TARGET", "StopRules"]

STOP_BUDGET = "budget"
STOP_TARGET = "target"
STOP_PATIENCE = "patience"


@dataclass(frozen=True)
class StopRules:
    """When a search stops; the first rule met gives the recorded reason.

    Parameters
    ----------
    budget : int
        Maximum number of trials (reason ``"budget"``).
    target : float or None
        Stop when the best objective is at or below it (reason ``"target"``).
    patience : int or None
        Stop after this many finished proposal trials (source ``"proposal"``
        or ``"resumed"``) later than the best one, none improving on it
        (reason ``"patience"``).
    """

    budget: int
    target: float | None = None
    patience: int | None = None

    def reason(
        self,
        n_issued: int,
        best_value: float,
        later_proposals: int,
    ) -> str | None:
        """The stop reason given the search state, or ``None`` to go on.

        Parameters
        ----------
        n_issued : int
            Trials proposed so far (finished or running).
        best_value : float
            Best finished objective (``inf`` if none).
        later_proposals : int
            Finished proposal trials with a larger trial index than the best.
        """
        if self.target is not None and np.isfinite(best_value) and best_value <= self.target:
            return STOP_TARGET
        if self.patience is not None and later_proposals >= self.patience:
            return STOP_PATIENCE
        if n_issued >= self.budget:
            return STOP_BUDGET
        return None


def count_later(trials: Iterable[tuple[int, str]], best_trial: int | None) -> int:
    """Number of proposal trials in ``(trial, source)`` pairs after ``best_trial``."""
    if best_trial is None:
        return 0
    return sum(1 for t, s in trials if t > best_trial and s in ("proposal", "resumed"))
