"""Progress of the stages after the search: a bar with an ETA for each, and stage lines.

The search has its own bar (:mod:`profshape.search.progress`). What follows it,
the posterior (surrogate sampling, refinement runs, the predictive check), the
bands, the predictions and the figures, used to print nothing for minutes.
:class:`StageProgress` gives each forward-run stage a tqdm bar counting its
forward runs (tqdm shows the rate and the ETA), announces it with a line that
says how many runs it will make and roughly how long they take (from the
median wall time of the search's successful trials and the number of
workers), and closes it with the elapsed time. It does not touch the stage's
code: it wraps the executor the stage submits its runs to.

``tqdm.auto`` draws a widget bar in Jupyter when ``ipywidgets`` is installed
(the ``notebook`` extra) and a text bar elsewhere.
"""

from __future__ import annotations

import math
import sys
import time
from collections.abc import Iterator
from concurrent.futures import Executor, Future
from contextlib import contextmanager
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["CountingExecutor", "StageProgress", "format_duration"]


def format_duration(seconds: float) -> str:
    """``"42 s"``, ``"3.5 min"``, ``"1.2 h"``."""
    if not math.isfinite(seconds):
        return "unknown"
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 5400:
        return f"{seconds / 60:.1f} min"
    return f"{seconds / 3600:.1f} h"


class CountingExecutor(Executor):
    """Passes every task to ``inner`` and calls ``on_done()`` as each one ends.

    Parameters
    ----------
    inner : Executor or None
        Where the tasks run (``None``: in the calling thread).
    on_done : callable
        Called with no argument when a task finishes (from any thread).
    """

    def __init__(self, inner: Executor | None, on_done: Any):
        from ..executors import InlineExecutor

        self.inner = inner if inner is not None else InlineExecutor()
        self.on_done = on_done

    def submit(self, fn: Any, /, *args: Any, **kwargs: Any) -> Future:
        future = self.inner.submit(fn, *args, **kwargs)
        future.add_done_callback(lambda _f: self.on_done())
        return future

    def shutdown(self, wait: bool = True, *, cancel_futures: bool = False) -> None:
        """Does nothing: the inner executor belongs to the caller."""


class StageProgress:
    """Stage lines and per-stage bars after the search.

    Parameters
    ----------
    trials : DataFrame
        The trial log (its ``wall_time_s`` of ok trials sets the ETA).
    n_workers : int
        Forward runs that go at once.
    enabled : bool
        False prints nothing.
    stream : file, optional
        Where lines and bars go (default ``sys.stderr``).
    """

    def __init__(self, trials: pd.DataFrame | None, n_workers: int, enabled: bool,
                 stream: Any = None):
        self.enabled = bool(enabled)
        self.stream = stream if stream is not None else sys.stderr
        self.n_workers = max(1, int(n_workers or 1))
        self.run_s = math.nan
        if trials is not None and len(trials) and "wall_time_s" in trials:
            ok = trials[trials["status"] == "ok"]
            t = pd.to_numeric(ok["wall_time_s"], errors="coerce").to_numpy(dtype=float)
            t = t[np.isfinite(t) & (t > 0)]
            if t.size:
                self.run_s = float(np.median(t))

    def eta_s(self, n_runs: int) -> float:
        """Rough time [s] of ``n_runs`` forward runs on the workers."""
        return math.ceil(max(0, n_runs) / self.n_workers) * self.run_s

    def line(self, text: str) -> None:
        """Print one stage line (``profshape: <text>``)."""
        if self.enabled:
            print(f"profshape: {text}", file=self.stream, flush=True)

    @contextmanager
    def executor(self, name: str, n_runs: int, executor: Executor | None, what: str = ""
                 ) -> Iterator[Executor | None]:
        """Announce a stage of about ``n_runs`` forward runs; yield its counting executor.

        Parameters
        ----------
        name : str
            Stage name, e.g. ``"posterior"``.
        n_runs : int
            Forward runs it will make at most (the bar's total).
        executor : Executor or None
            Where the stage's runs go (wrapped, not replaced).
        what : str
            What the stage does, for its line.
        """
        if not self.enabled:
            yield executor
            return
        from tqdm.auto import tqdm

        eta = self.eta_s(n_runs)
        hint = f"; about {format_duration(eta)} of forward runs" if math.isfinite(eta) else ""
        self.line(f"{name}: {what + ', ' if what else ''}up to {n_runs} forward runs{hint}")
        t0 = time.perf_counter()
        bar = tqdm(total=max(n_runs, 1), desc=name, unit="run", file=self.stream,
                   dynamic_ncols=True, leave=False)
        state = "stopped after"
        try:
            yield CountingExecutor(executor, lambda: bar.update(1))
            state = "done in"
        finally:
            n_done = bar.n
            bar.close()
            self.line(f"{name}: {state} {format_duration(time.perf_counter() - t0)} "
                      f"({n_done} forward runs)")

    @contextmanager
    def timed(self, name: str, what: str) -> Iterator[None]:
        """A stage without forward runs: one line before, one with its time after."""
        t0 = time.perf_counter()
        self.line(f"{name}: {what}")
        state = "stopped after"
        try:
            yield
            state = "done in"
        finally:
            self.line(f"{name}: {state} {format_duration(time.perf_counter() - t0)}")
