"""Executors for forward runs: a local process pool, a dask cluster, or inline.

Any :class:`concurrent.futures.Executor` works with
:func:`~profshape.search.run_search`; these helpers make the common ones.
"""

from __future__ import annotations

import multiprocessing
import os
import threading
import time
from concurrent.futures import Executor, Future, ProcessPoolExecutor
from typing import Any

from .exceptions import InputDataError

__all__ = ["InlineExecutor", "dask_executor", "local_executor"]


def local_executor(max_workers: int | None = None) -> ProcessPoolExecutor:
    """A local process pool (the default of :func:`run_search`).

    Parameters
    ----------
    max_workers : int, optional
        Number of worker processes; default ``os.cpu_count()``.

    Notes
    -----
    Workers are started with the ``"spawn"`` method: forking a process that
    has already started torch's or OpenMP's threads can deadlock. The forward
    model and shape family must therefore be picklable (module-level
    functions, not lambdas).

    Each worker exits when the process that made the pool dies, even by
    SIGKILL (an idle pool worker otherwise waits for work forever).
    """
    n = max_workers or os.cpu_count() or 1
    if n < 1:
        raise InputDataError(f"max_workers must be >= 1; got {max_workers!r}.")
    return ProcessPoolExecutor(max_workers=n, mp_context=multiprocessing.get_context("spawn"),
                               initializer=_exit_with_parent, initargs=(os.getpid(),))


def _exit_with_parent(parent_pid: int) -> None:
    """Worker initializer: end this worker as soon as ``parent_pid`` is gone."""

    def watch() -> None:
        while os.getppid() == parent_pid:
            time.sleep(0.5)
        os._exit(1)

    threading.Thread(target=watch, name="profshape-parent-watch", daemon=True).start()


def dask_executor(client: Any) -> Executor:
    """The :class:`concurrent.futures.Executor` of a ``dask.distributed.Client``.

    Parameters
    ----------
    client : distributed.Client
        A connected client (to a ``LocalCluster`` or a real cluster).

    Examples
    --------
    >>> from distributed import Client, LocalCluster      # doctest: +SKIP
    >>> client = Client(LocalCluster(n_workers=2))         # doctest: +SKIP
    >>> run_search(problem, settings, "log.parquet",
    ...            executor=dask_executor(client))         # doctest: +SKIP
    """
    get = getattr(client, "get_executor", None)
    if get is None:
        raise InputDataError(
            f"client must be a dask.distributed.Client; got {type(client).__name__}."
        )
    return get(pure=False)


class InlineExecutor(Executor):
    """Runs each task at submission in the calling thread (no parallelism).

    Handy for debugging, for models that cannot be pickled, and for tests.
    """

    def submit(self, fn: Any, /, *args: Any, **kwargs: Any) -> Future:
        future: Future = Future()
        try:
            future.set_result(fn(*args, **kwargs))
        except BaseException as exc:
            future.set_exception(exc)
        return future
