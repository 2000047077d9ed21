"""Executors for forward runs: a local process pool, a dask cluster, or inline.

Any :class:`concurrent.futures.Executor` works with
:func:`~profshape.search.run_search`; these helpers make the common ones.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import sys
import tempfile
import threading
import time
from concurrent.futures import Executor, Future, ProcessPoolExecutor
from pathlib import Path
from typing import Any

from .exceptions import InputDataError

__all__ = ["SPAWN_GUARD_HINT", "InlineExecutor", "dask_executor", "local_executor",
           "refuse_in_spawn_bootstrap", "spawn_bootstrap_failure"]

#: What a trial's reason says when spawned workers re-ran an unguarded script.
SPAWN_GUARD_HINT = (
    "worker processes could not start: each spawned worker re-ran the main script {script} "
    "on import and tried to start its own process pool (Python's multiprocessing "
    "bootstrapping error). Put the calibration code of that script under "
    "`if __name__ == \"__main__\":`, or pass executor=InlineExecutor() to run in this process"
)


def _marker(parent_pid: int) -> Path:
    return Path(tempfile.gettempdir()) / f"profshape-spawn-bootstrap-{parent_pid}.txt"


def _in_spawn_bootstrap() -> bool:
    """True inside a spawned child that is still importing the parent's main module."""
    # the flag multiprocessing itself checks before refusing to start a process
    # (multiprocessing.spawn._check_not_importing_main); set while the main module re-runs
    return bool(getattr(multiprocessing.current_process(), "_inheriting", False))


def refuse_in_spawn_bootstrap() -> None:
    """Inside a spawned worker re-running an unguarded main script: leave a marker, raise.

    Called where profshape would start processes (:func:`local_executor`,
    :func:`profshape.search.run_search`); does nothing in a normal process.

    Raises
    ------
    RuntimeError
        Naming the missing ``if __name__ == "__main__":`` guard.
    """
    if not _in_spawn_bootstrap():
        return
    script = getattr(sys.modules.get("__mp_main__") or sys.modules.get("__main__"), "__file__", "")
    with contextlib.suppress(OSError):
        _marker(os.getppid()).write_text(str(script), encoding="utf-8")
    raise RuntimeError(SPAWN_GUARD_HINT.format(script=script or "(unknown)") + ".")


def spawn_bootstrap_failure(parent_pid: int | None = None) -> str | None:
    """The reason to log if this process's spawned workers died bootstrapping, else None.

    A worker started by the ``"spawn"`` method imports the parent's main script;
    without an ``if __name__ == "__main__":`` guard the script calls
    :func:`local_executor` again inside the worker, which then leaves a marker
    (see :func:`local_executor`) and exits. The parent reads the marker here.
    """
    path = _marker(os.getpid() if parent_pid is None else parent_pid)
    try:
        script = path.read_text(encoding="utf-8").strip()
    except OSError:
        return None
    return SPAWN_GUARD_HINT.format(script=script or "(unknown)")


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
    refuse_in_spawn_bootstrap()
    with contextlib.suppress(OSError):  # a stale marker of an earlier process with this pid
        _marker(os.getpid()).unlink()
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
