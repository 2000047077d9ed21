"""What every ``profshape`` command shares: exit codes, signals, messages, the summary."""

from __future__ import annotations

import contextlib
import signal
import sys
import warnings
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from ..exceptions import ProfshapeWarning

__all__ = ["EXIT_BAD_INPUT", "EXIT_FAILURE", "EXIT_INTERRUPTED", "EXIT_OK", "EXIT_TERMINATED",
           "Terminated", "print_error", "print_summary", "signals_and_warnings"]

EXIT_OK, EXIT_FAILURE, EXIT_BAD_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130
EXIT_TERMINATED = 128 + signal.SIGTERM


class Terminated(KeyboardInterrupt):
    """SIGTERM, handled like Ctrl-C (the run unwinds, pools close, the log is kept)."""


def _on_sigterm(signum: int, frame: object) -> None:
    raise Terminated()


@contextlib.contextmanager
def signals_and_warnings() -> Iterator[None]:
    """SIGTERM stops like Ctrl-C; profshape warnings print as one ``profshape: warning:`` line."""
    previous = None
    with contextlib.suppress(ValueError):  # not in the main thread: leave SIGTERM alone
        previous = signal.signal(signal.SIGTERM, _on_sigterm)
    shown = warnings.showwarning

    def show(message: Warning | str, category: type[Warning], filename: str, lineno: int,
             file: Any = None, line: str | None = None) -> None:
        if issubclass(category, ProfshapeWarning):
            print(f"profshape: warning: {message}", file=sys.stderr)
        else:
            shown(message, category, filename, lineno, file, line)

    warnings.showwarning = show
    try:
        yield
    finally:
        warnings.showwarning = shown
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


def print_error(message: str) -> None:
    """``profshape: error: ...`` on one line of standard error."""
    one_line = " ".join(str(message).splitlines())  # a library's multi-line text on one line
    print(f"profshape: error: {one_line}", file=sys.stderr)


def print_summary(summary: dict[str, Any], out: Path) -> None:
    """The terminal summary of a calibration written into ``out``."""
    best = summary.get("best_reduced_chi2")
    print(f"output folder: {out}")
    print(f"trials: {summary.get('n_trials')} ({summary.get('n_failed')} failed); "
          f"stop reason: {summary.get('stop_reason')}")
    if summary.get("stop_detail"):
        print(f"  the repeated failure: {summary['stop_detail'][-1500:]}")
    if best is not None:
        print(f"best reduced chi-square: {best:.4g}")
    for name, value in (summary.get("best_coefficients") or {}).items():
        print(f"  {name} = {value:.6g}")
    from ..posterior.verdicts import terminal_lines

    for line in terminal_lines(summary.get("checks") or []):
        print(line)
    if summary.get("report"):
        print(f"report: {out / summary['report']}")
