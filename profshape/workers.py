"""Workers on batch-scheduled clusters (SLURM, PBS) through dask-jobqueue.

The ``[workers]`` table of a calibration file says where the forward runs go:

- ``kind = "local"`` (default): this machine, ``n_workers`` processes (or a
  running dask scheduler at ``scheduler_address``);
- ``kind = "slurm"`` or ``"pbs"``: ``jobs`` batch jobs, each with ``cores``
  cores, ``memory`` (e.g. ``"8GB"``) and ``walltime`` (``"HH:MM:SS"``), in
  ``queue`` under ``account``, with extra ``job_directives`` (lines for the job
  script header, e.g. ``"--constraint=cpu"``); each job runs ``cores``
  single-threaded dask worker processes. The scheduler runs inside the
  calibration process; ``python`` is the interpreter the jobs start
  (default: this one).

Pre-emption and wall-time ends: the job count is kept by dask's adaptive
scaling (a job that ends is replaced), and each worker retires itself a few
minutes before its wall time (dask's ``--lifetime``), so its tasks move to
another worker instead of being killed. A task whose worker disappears is run
again elsewhere by the dask scheduler; one that keeps losing its workers ends
as ``KilledWorker``, which the search logs as a failed trial with that reason
and goes on. dask-jobqueue is an optional dependency:
``pip install "profshape[cluster]"``.
"""

from __future__ import annotations

import re
import sys
from collections.abc import Iterator, Mapping
from concurrent.futures import Executor
from contextlib import ExitStack, contextmanager
from typing import Any

from .exceptions import ConfigError, InputDataError

__all__ = [
    "CLUSTER_KINDS",
    "check_workers_table",
    "cluster_executor",
    "jobqueue_cluster",
    "slots_in_flight",
    "walltime_seconds",
]

CLUSTER_KINDS = ("local", "slurm", "pbs")
_WALLTIME = re.compile(r"^(?:(\d+)-)?(\d{1,4}):(\d{2})(?::(\d{2}))?$")
_MEMORY = re.compile(r"^\s*\d+(\.\d+)?\s*(B|KB|MB|GB|TB|KiB|MiB|GiB|TiB)\s*$", re.IGNORECASE)
_RETIRE_MARGIN_S = 300  # leave the job this long before its wall time (common practice, no source)


def walltime_seconds(text: str) -> int:
    """``"[D-]HH:MM[:SS]"`` as seconds (``"01:30:00"`` -> 5400).

    Raises
    ------
    InputDataError
        If the text is not of that form (a ValueError).
    """
    m = _WALLTIME.match(str(text).strip())
    if not m:
        raise InputDataError(f"walltime must look like 'HH:MM:SS' (or 'D-HH:MM:SS'); got {text!r}.")
    days, hours, minutes, seconds = (int(g) if g else 0 for g in m.groups())
    if m.group(4) is None:  # HH:MM
        return days * 86400 + hours * 3600 + minutes * 60
    return days * 86400 + hours * 3600 + minutes * 60 + seconds


def check_workers_table(cfg: Any) -> None:
    """Check the ``[workers]`` keys of a parsed calibration file (ConfigError naming the key)."""
    w = cfg.data["workers"]
    kind = str(w["kind"]).lower()
    if kind not in CLUSTER_KINDS:
        raise cfg.error("workers.kind", f"must be one of {list(CLUSTER_KINDS)}; got {w['kind']!r}.")
    w["kind"] = kind
    for key in ("jobs", "cores"):
        if w[key] < 1:
            raise cfg.error(f"workers.{key}", f"must be >= 1; got {w[key]!r}.")
    if not _MEMORY.match(w["memory"]):
        raise cfg.error("workers.memory", f"must be an amount like '4GB' or '16GiB'; got {w['memory']!r}.")
    try:
        walltime_seconds(w["walltime"])
    except ValueError as exc:
        raise cfg.error("workers.walltime", str(exc)) from None
    if not all(isinstance(d, str) for d in w["job_directives"]):
        raise cfg.error("workers.job_directives", "must be an array of strings (job-script header "
                        "options, e.g. [\"--constraint=cpu\"]).")
    if kind != "local" and w["scheduler_address"]:
        raise cfg.error("workers.scheduler_address", f"give either kind = {kind!r} (profshape starts "
                        "the jobs) or scheduler_address (a running scheduler), not both.")


def slots_in_flight(workers: Mapping[str, Any]) -> int:
    """Forward runs that can go at once: ``jobs * cores`` on a cluster, else ``n_workers``."""
    if str(workers.get("kind", "local")) == "local":
        return int(workers.get("n_workers", 1))
    return int(workers["jobs"]) * int(workers["cores"])


def jobqueue_cluster(workers: Mapping[str, Any]) -> Any:
    """A dask-jobqueue cluster (not yet scaled) for a ``[workers]`` table of kind slurm or pbs.

    Raises
    ------
    ConfigError
        If dask-jobqueue is not installed or the kind is not a batch scheduler.
    """
    kind = str(workers["kind"])
    try:
        import dask_jobqueue
    except ImportError:
        raise ConfigError(
            f"[workers] kind = {kind!r} needs dask-jobqueue: pip install \"profshape[cluster]\" "
            "(or pip install dask-jobqueue)."
        ) from None
    classes = {"slurm": dask_jobqueue.SLURMCluster, "pbs": dask_jobqueue.PBSCluster}
    if kind not in classes:
        raise ConfigError(f"[workers] kind = {kind!r} is not a batch scheduler; use 'slurm' or 'pbs'.")
    cores = int(workers["cores"])
    wall = walltime_seconds(workers["walltime"])
    extra_args: list[str] = []
    if wall > 2 * _RETIRE_MARGIN_S:
        # retire before the scheduler kills the job; staggered so the workers do not leave at once
        extra_args = ["--lifetime", f"{wall - _RETIRE_MARGIN_S}s",
                      "--lifetime-stagger", f"{_RETIRE_MARGIN_S // 2}s"]
    kwargs: dict[str, Any] = {
        "cores": cores,
        "processes": cores,  # single-threaded workers: one forward run per core
        "memory": str(workers["memory"]),
        "walltime": str(workers["walltime"]),
        "python": workers.get("python") or sys.executable,
        "job_extra_directives": list(workers.get("job_directives") or []),
        "worker_extra_args": extra_args,
        "job_name": "profshape-worker",
    }
    if workers.get("queue"):
        kwargs["queue"] = str(workers["queue"])
    if workers.get("account"):
        kwargs["account"] = str(workers["account"])
    return classes[kind](**kwargs)


@contextmanager
def cluster_executor(cluster: Any, jobs: int | None = None) -> Iterator[Executor]:
    """An executor on a dask cluster, kept at size while it runs; closed at the end.

    Parameters
    ----------
    cluster : dask cluster
        A ``distributed.LocalCluster`` or a dask-jobqueue cluster.
    jobs : int, optional
        For a dask-jobqueue cluster: the number of batch jobs to keep (adaptive
        scaling with minimum = maximum = ``jobs`` replaces a job that ends or
        is pre-empted). Ignored for other clusters.

    Yields
    ------
    concurrent.futures.Executor
    """
    from distributed import Client

    from .executors import dask_executor

    with ExitStack() as stack:
        stack.callback(cluster.close)
        if jobs is not None and hasattr(cluster, "job_script"):
            cluster.adapt(minimum_jobs=int(jobs), maximum_jobs=int(jobs))
        client = stack.enter_context(Client(cluster))
        yield dask_executor(client)


def executor_for_config(cfg: Any, stack: ExitStack) -> Executor:
    """The executor of a ``[workers]`` table of kind slurm or pbs (closed with ``stack``)."""
    workers = cfg.section("workers")
    cluster = jobqueue_cluster(workers)
    return stack.enter_context(cluster_executor(cluster, int(workers["jobs"])))
