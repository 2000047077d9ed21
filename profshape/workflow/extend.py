"""Extend a calibration: more trials for a run that has finished (or stopped early).

``profshape resume RUN --budget N`` (and :func:`profshape.workflow.resume` with
``budget=N``) raises the run's trial budget to ``N`` in all. The finished
trials are kept, the search goes on with the same seed stream from where it
stopped, and the posterior, bands, predictions, figures and report are redone
from the longer log. The stop rules that may have ended the first run
(``target_reduced_chi2``, ``patience``) are lifted for the extension: asking
for more trials means running them.
"""

from __future__ import annotations

from pathlib import Path

from ..config import CalibrationConfig
from ..exceptions import InputDataError

__all__ = ["extend_budget", "finished_trials"]


def finished_trials(out_dir: str | Path) -> int:
    """Number of trials in a calibration folder's trial log (0 without one)."""
    from ..trials import read_trials
    from .layout import TRIALS_FILE

    log = Path(out_dir) / TRIALS_FILE
    return len(read_trials(log)) if log.exists() else 0


def extend_budget(cfg: CalibrationConfig, out_dir: str | Path, budget: int) -> CalibrationConfig:
    """Set the trial budget of a stored calibration to ``budget`` trials in all.

    Parameters
    ----------
    cfg : CalibrationConfig
        The calibration read from the folder (changed in place and returned).
    out_dir : path-like
        Its output folder (to count the finished trials).
    budget : int
        The new total number of trials; must exceed the trials already done.

    Raises
    ------
    InputDataError
        If ``budget`` is not an integer above the number of finished trials.
    """
    if isinstance(budget, bool) or not isinstance(budget, int) or budget < 1:
        raise InputDataError(f"--budget must be an integer >= 1 (the new total of trials); "
                             f"got {budget!r}.")
    done = finished_trials(out_dir)
    if budget <= done:
        raise InputDataError(
            f"--budget {budget}: the run in {out_dir} already has {done} trials; give the new "
            f"total, above {done} (e.g. --budget {done + 10} for 10 more)."
        )
    search = cfg.data["search"]
    search["budget"] = int(budget)
    search["patience"] = None
    search["target_reduced_chi2"] = None
    return cfg
