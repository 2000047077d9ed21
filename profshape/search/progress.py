"""A tqdm progress bar for the search (silent when asked)."""

from __future__ import annotations

import math

from tqdm.auto import tqdm

__all__ = ["SearchProgress"]


class SearchProgress:
    """Trials done, failures, best reduced chi-square and the last proposal's source.

    Parameters
    ----------
    total : int
        Trial budget.
    enabled : bool
        False for a silent run.
    initial : int, default=0
        Trials already done (resume).
    best : float, default=inf
        Best reduced chi-square of the trials already done (resume), so the bar
        shows the same best as the trial log from the start.
    n_failed : int, default=0
        Failed trials among those already done (resume).
    """

    def __init__(self, total: int, enabled: bool, initial: int = 0, best: float = math.inf,
                 n_failed: int = 0):
        self._bar = tqdm(total=total, initial=initial, disable=not enabled, unit="trial",
                         desc="search", dynamic_ncols=True, leave=True)
        self.n_failed = int(n_failed)
        self.best = float(best) if best is not None and math.isfinite(best) else math.inf
        self.source = ""
        if initial:
            self._bar.set_postfix(failed=self.n_failed, best=self._best_text(), refresh=False)

    def _best_text(self) -> str:
        return f"{self.best:.4g}" if math.isfinite(self.best) else "-"

    def update(self, ok: bool, value: float, source: str) -> None:
        """Count one finished trial."""
        if not ok:
            self.n_failed += 1
        elif value < self.best:
            self.best = value
        self.source = source
        self._bar.set_postfix(failed=self.n_failed, best=self._best_text(), last=source,
                              refresh=False)
        self._bar.update(1)

    def close(self) -> None:
        """Close the bar."""
        self._bar.close()
