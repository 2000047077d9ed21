"""Fixtures of the reliability suite and the tally it prints at the end of the run.

Each test adds what it did to the session tally (faults injected and survived,
interruptions survived, bad inputs tried and refused with a clear error); the
``pytest_terminal_summary`` hook prints the totals, and the README's reliability
section quotes them.
"""

from __future__ import annotations

import collections
import os
import sys
import time
from pathlib import Path

import psutil
import pytest
import torch

torch.set_num_threads(1)

HERE = Path(__file__).resolve().parent
TESTS = HERE.parent
if str(TESTS) not in sys.path:  # so spawned workers and subprocesses import reliability._faulty
    sys.path.insert(0, str(TESTS))

_TALLY: collections.Counter[str] = collections.Counter()

#: Printed lines of the tally, in this order, with their labels.
TALLY_LINES = (
    ("faults_injected", "forward-model faults injected"),
    ("faults_survived", "faults survived (logged with status and reason, search went on)"),
    ("kills_survived", "SIGKILL interruptions survived (resumed, nothing lost or duplicated)"),
    ("sigint_survived", "SIGINT interruptions stopped cleanly"),
    ("bad_inputs_tried", "bad inputs tried"),
    ("bad_inputs_refused", "bad inputs refused with a clear error"),
    ("property_refused", "generated inputs (hypothesis) refused with InputDataError"),
    ("escapes_refused", "external-adapter escape attempts refused"),
    ("zero_misfit_runs", "zero- and tiny-misfit runs finished and logged"),
    ("flat_objective_runs", "flat-objective runs warned (no posterior on them)"),
    ("nothing_succeeded_runs", "campaigns where nothing succeeded ended non-zero with the cause"),
    ("worker_deaths_survived", "worker deaths survived in a command-line campaign"),
    ("concurrent_writers_refused", "concurrent writers refused (holder named)"),
    ("floods_bounded", "output floods bounded (stderr, output.json, tables)"),
    ("daemons_reaped", "daemons (setsid + fork) reaped"),
    ("sigterm_survived", "SIGTERM interruptions stopped cleanly with the resume hint"),
)
_FIGURES: dict[str, str] = {}


class Tally:
    """Counts of what the suite did (session-wide)."""

    def add(self, key: str, n: int = 1) -> None:
        """Add ``n`` to counter ``key``."""
        _TALLY[key] += int(n)

    def figure(self, label: str, value: str) -> None:
        """A measured figure printed after the counts (e.g. a peak memory)."""
        _FIGURES[label] = value


@pytest.fixture(scope="session")
def tally() -> Tally:
    """The session tally."""
    return Tally()


def _children() -> set[int]:
    """Live descendants of this process, without multiprocessing's resource tracker.

    The resource tracker is one helper process that multiprocessing starts once and
    keeps for the life of the interpreter; it is not a worker.
    """
    out = set()
    for child in psutil.Process().children(recursive=True):
        try:
            if child.status() == psutil.STATUS_ZOMBIE:
                continue
            if "resource_tracker" in " ".join(child.cmdline()):
                continue
            out.add(child.pid)
        except (psutil.NoSuchProcess, psutil.AccessDenied):
            continue
    return out


def wait_no_new_children(before: set[int], timeout_s: float = 10.0) -> set[int]:
    """Wait until no descendant beyond ``before`` lives; return those left after the wait."""
    deadline = time.monotonic() + timeout_s
    while True:
        left = _children() - before
        if not left or time.monotonic() > deadline:
            return left
        time.sleep(0.1)


@pytest.fixture
def no_leftover_processes():
    """Assert that a test leaves no child process behind (psutil, before/after)."""
    before = _children()
    yield before
    left = wait_no_new_children(before)
    details = []
    for pid in left:
        try:
            details.append(" ".join(psutil.Process(pid).cmdline())[:200])
        except psutil.NoSuchProcess:
            pass
    assert not left, f"processes left behind: {details}"


def pytest_terminal_summary(terminalreporter, exitstatus, config):
    """Print the reliability tally (only when reliability tests ran)."""
    if not _TALLY:
        return
    tr = terminalreporter
    tr.section("profshape reliability tally")
    lines = [f"{label}: {_TALLY.get(key, 0)}" for key, label in TALLY_LINES]
    lines += [f"{label}: {value}" for label, value in sorted(_FIGURES.items())]
    for line in lines:
        tr.write_line(line)
    out = os.environ.get("PROFSHAPE_TALLY_FILE")
    if out:
        Path(out).write_text("\n".join(lines) + "\n", encoding="utf-8")
