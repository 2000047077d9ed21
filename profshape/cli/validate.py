"""``profshape validate RUN``: leave-one-operating-point-out validation of a run."""

from __future__ import annotations

import argparse
from typing import Any

from ._common import EXIT_OK


def _cmd_validate(args: argparse.Namespace) -> int:
    from ..validate import print_validation, validate_run

    print_validation(validate_run(args.folder))
    return EXIT_OK


def add_parser(sub: Any) -> None:
    """Add ``profshape validate RUN`` to the command-line parser's subcommands."""
    p = sub.add_parser("validate", help="leave-one-operating-point-out validation of a run",
                       description="Predict each operating point of FOLDER from the others (the "
                                   "run's trials re-scored without it), with 90 % bands; writes "
                                   "validation.parquet and validation.json into FOLDER.")
    p.add_argument("folder", help="output folder of the calibration")
    p.set_defaults(func=_cmd_validate)
