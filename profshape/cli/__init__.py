"""The ``profshape`` command line (one module per command group).

Exit codes: 0 success, 2 bad input (the message says what and where; also an
output folder that another process is writing), 1 a failure of the run itself
(including a calibration in which no trial succeeded, or whose posterior could
not be computed: the summary and report are written first), 130 interrupted
(Ctrl-C) and 143 terminated (SIGTERM); after either, the trial log keeps what
was done and ``profshape resume DIR`` continues.
"""

from __future__ import annotations

import argparse
import os
from collections.abc import Sequence

from .._version import __version__
from ..exceptions import CampaignFailedError, InputDataError
from . import calibration, solve, validate
from ._common import (
    EXIT_BAD_INPUT,
    EXIT_FAILURE,
    EXIT_INTERRUPTED,
    EXIT_OK,
    EXIT_TERMINATED,
    Terminated,
    print_error,
    signals_and_warnings,
)
from .calibration import demo_config_text

__all__ = ["EXIT_BAD_INPUT", "EXIT_FAILURE", "EXIT_INTERRUPTED", "EXIT_OK", "EXIT_TERMINATED",
           "demo_config_text", "main"]


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="profshape",
        description="Calibrate the anomalous electron-transport profile of a Hall-effect-thruster "
                    "discharge model against measured ion velocities by Bayesian optimisation.",
    )
    parser.add_argument("--version", action="version", version=f"profshape {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    calibration.add_parsers(sub)
    validate.add_parser(sub)
    solve.add_parser(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``profshape`` console script; returns the exit code."""
    parser = _parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return EXIT_BAD_INPUT
    try:
        with signals_and_warnings():
            return int(args.func(args))
    except KeyboardInterrupt as exc:
        folder = getattr(args, "out", None) or getattr(args, "folder", None)
        hint = f" `profshape resume {folder}`" if folder else " `profshape resume <output folder>`"
        what = "terminated (SIGTERM)" if isinstance(exc, Terminated) else "interrupted"
        print_error(f"{what}; the trial log keeps every finished trial. Continue with" + hint + ".")
        return EXIT_TERMINATED if isinstance(exc, Terminated) else EXIT_INTERRUPTED
    except CampaignFailedError as exc:
        print_error(str(exc))
        return EXIT_FAILURE
    except InputDataError as exc:
        print_error(str(exc))
        return EXIT_BAD_INPUT
    except Exception as exc:  # a failure of the run: say what, not a traceback
        print_error(f"the run failed: {type(exc).__name__}: {exc}")
        if "PROFSHAPE_DEBUG" in os.environ:
            raise
        return EXIT_FAILURE

