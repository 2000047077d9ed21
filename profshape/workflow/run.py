"""The whole job: build a calibration from its file, search, posterior and outputs, report.

:func:`run_calibration` runs the stages in order, each reading what the one
before saved: the search (:func:`profshape.search.run_search`, the trial
log), the posterior stage (:func:`profshape.workflow.after_search.run_after_search`),
then the report (:func:`profshape.workflow.report.write_outputs`), which
renders the saved files. The output folder's files are named in
:mod:`profshape.workflow.layout`.
"""

from __future__ import annotations

import math
import warnings
from concurrent.futures import Executor
from contextlib import ExitStack
from pathlib import Path
from typing import Any

import numpy as np

from ..config import CalibrationConfig, load_config
from ..exceptions import CampaignFailedError, FlatObjectiveWarning
from .build import Calibration, ReportInputs, build_calibration
from .folder import config_from_folder, new_folder_name, open_output_folder
from .folder_lock import lock_output_folder
from .layout import TRIALS_FILE

__all__ = ["calibrate", "finish", "make_executor", "resume", "run_calibration"]


# --------------------------------------------------------------- executors
def make_executor(cfg: CalibrationConfig, stack: ExitStack) -> Executor | None:
    workers = cfg.section("workers")
    if workers.get("kind", "local") != "local":  # SLURM / PBS through dask-jobqueue
        from ..workers import executor_for_config

        return executor_for_config(cfg, stack)
    if workers["scheduler_address"]:
        from distributed import Client

        from ..executors import dask_executor

        try:
            client = stack.enter_context(Client(workers["scheduler_address"], timeout="20s"))
        except OSError as exc:
            raise cfg.error("workers.scheduler_address", f"cannot reach the dask scheduler: {exc}") from None
        return dask_executor(client)
    if workers["n_workers"] <= 1:
        from ..executors import InlineExecutor

        return InlineExecutor()
    return None  # a local pool: run_search makes its own (and replaces it if a worker dies)


# ----------------------------------------------------------------- running
def finish(cal: Calibration, result: Any, out: str | Path, executor: Executor | None = None,
           skip_posterior: str | None = None) -> dict[str, Any]:
    """The stages after a search: the posterior stage's files, then the report.

    The parameters are those of :func:`profshape.workflow.after_search.run_after_search`.

    Returns
    -------
    dict
        The summary; it holds ``posterior_error`` when the posterior could not
        be computed (the search's summary and report are written all the same).
    """
    from . import report
    from .after_search import run_after_search, stage_progress

    out = Path(out)
    error, n_ok = run_after_search(cal, result, out, executor, skip_posterior=skip_posterior)
    with stage_progress(cal, result).timed("report", "drawing the figures, writing summary and report"):
        summary = report.write_outputs(out, ReportInputs.of(cal))
    if error is not None and n_ok:
        summary["posterior_error"] = error
    return summary



def _flat_objective(trials: Any) -> str | None:
    """Why the objective looks flat (every successful trial gave one misfit), or None."""
    ok = trials.loc[trials["status"] == "ok", "reduced_chi2"].to_numpy(dtype=float)
    ok = ok[np.isfinite(ok)]
    if ok.size < 3:
        return None
    spread = float(ok.max() - ok.min())
    # relative spread at rounding level (common practice, no source)
    if spread <= 1e-9 * max(1.0, float(np.abs(ok).max())):
        return (f"flat objective: all {ok.size} successful trials gave the same reduced "
                f"chi-square ({float(ok[0]):.6g}); the forward model's output does not depend on "
                "the coefficients, so the 'best fit' is arbitrary and no posterior was sampled. "
                "Check that the program reads the profile file it is given.")
    return None


def _failure_summary(trials: Any) -> str:
    """The most common failure reason of a log, with its count."""
    from ..trials import reason_signature

    errors = [str(e) for e in trials.loc[trials["status"] != "ok", "error"]]
    if not errors:
        return ""
    counts: dict[str, tuple[int, str]] = {}
    for e in errors:
        sig = reason_signature(e)
        n, first = counts.get(sig, (0, e))
        counts[sig] = (n + 1, first)
    n, reason = max(counts.values(), key=lambda t: t[0])
    return f"{n} of {len(errors)} failed with: {reason[-1500:]}"


def run_calibration(cfg: CalibrationConfig, out_dir: str | Path, *, resume: bool = False,
                    progress: bool = True) -> dict[str, Any]:
    """Search, then posterior, bands, predictions, figures and report.

    The output folder is locked for the whole run (a second writer is refused;
    see :mod:`profshape.workflow.folder_lock`), and every section of the file is checked
    before the first forward run.

    Returns
    -------
    dict
        The summary (also written to ``summary.json``).

    Raises
    ------
    CampaignFailedError
        After the summary and report are written, when no trial succeeded or
        the posterior could not be computed.
    """
    from ..search import run_search

    with lock_output_folder(out_dir), ExitStack() as stack:
        out = open_output_folder(cfg, out_dir, resume=resume)
        cal = build_calibration(cfg, out, progress=progress)
        executor = make_executor(cfg, stack)
        limit = cfg.section("search")["stop_after_failures"] or None
        result = run_search(cal.problem, cal.search_settings, out / TRIALS_FILE,
                            executor=executor, resume=resume, max_same_failures=limit)
        flat = _flat_objective(result.trials) if result.best_trial is not None else None
        if flat:
            warnings.warn(flat, FlatObjectiveWarning, stacklevel=2)
        n_ok = int((result.trials["status"] == "ok").sum())
        if executor is None and cal.posterior_settings is not None and not flat \
                and n_ok >= cal.problem.dim + 2:  # the posterior will run: give it a pool
            from ..executors import local_executor

            executor = stack.enter_context(local_executor(cfg.section("workers")["n_workers"]))
        summary = finish(cal, result, out, executor=executor, skip_posterior=flat)
    summary["output_folder"] = str(out)  # where it all went (the command line prints it)
    if result.best_trial is None or not math.isfinite(result.best_reduced_chi2):
        why = _failure_summary(result.trials)
        raise CampaignFailedError(
            f"no trial succeeded ({result.n_trials} trials, stop reason: {result.stop_reason}); "
            f"{why}. The log and report are in {out}; fix the cause, then start again."
        )
    if summary.get("posterior_error"):
        raise CampaignFailedError(
            f"the search finished (best reduced chi-square {result.best_reduced_chi2:.4g}, "
            f"trial {result.best_trial}) but the posterior could not be computed: "
            f"{summary['posterior_error']}. The summary and report of the search are in {out}."
        )
    return summary


def calibrate(path: str | Path, out_dir: str | Path | None = None, *, progress: bool = True
              ) -> dict[str, Any]:
    """Run the calibration described by the file at ``path`` into ``out_dir``."""
    cfg = load_config(path)
    out = out_dir or cfg.section("output").get("folder") or new_folder_name()
    if not Path(out).is_absolute() and out_dir is None and cfg.section("output").get("folder"):
        out = cfg.base_dir / out
    return run_calibration(cfg, out, progress=progress)


def resume(out_dir: str | Path, *, progress: bool = True, budget: int | None = None
           ) -> dict[str, Any]:
    """Continue an interrupted calibration from its trial log.

    With ``budget``, extend the run to that many trials in all (also a finished
    one; see :mod:`profshape.workflow.extend`); the posterior and outputs are redone.
    """
    cfg = config_from_folder(out_dir)
    if budget is not None:
        from .extend import extend_budget

        extend_budget(cfg, out_dir, budget)
    return run_calibration(cfg, out_dir, resume=True, progress=progress)
