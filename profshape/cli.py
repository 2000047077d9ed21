"""The ``profshape`` command line.

Exit codes: 0 success, 2 bad input (the message says what and where), 1 a
failure of the run itself, 130 interrupted (Ctrl-C; the trial log keeps what
was done, and ``profshape resume DIR`` continues).
"""

from __future__ import annotations

import argparse
import re
import sys
from collections.abc import Sequence
from pathlib import Path

from ._version import __version__
from .demo import demo_data_folder
from .exceptions import InputDataError

__all__ = ["main"]

EXIT_OK, EXIT_FAILURE, EXIT_BAD_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


def _err(message: str) -> None:
    print(f"profshape: error: {message}", file=sys.stderr)


def demo_config_text(budget: int | None = None, seed: int | None = None,
                     workers: int | None = None) -> tuple[str, Path]:
    """The bundled demo's calibration file with overrides, and its folder."""
    folder = demo_data_folder()
    text = (folder / "demo.toml").read_text(encoding="utf-8")
    for key, value in (("budget", budget), ("seed", seed), ("n_workers", workers)):
        if value is not None:
            text, n = re.subn(rf"(?m)^{key}\s*=.*$", f"{key} = {int(value)}", text, count=1)
            if n != 1:  # pragma: no cover - the bundled file always has these keys
                raise RuntimeError(f"demo.toml has no {key!r} line")
    return text, folder


def _cmd_demo(args: argparse.Namespace) -> int:
    from .config import parse_config
    from .pipeline import new_folder_name, run_calibration

    for name in ("budget", "workers"):
        v = getattr(args, name)
        if v is not None and v < 1:
            raise InputDataError(f"--{name} must be >= 1; got {v}.")
    text, folder = demo_config_text(args.budget, args.seed, args.workers)
    cfg = parse_config(text, path=folder / "demo.toml", base_dir=folder)
    out = Path(args.out) if args.out else new_folder_name("profshape-demo")
    summary = run_calibration(cfg, out, progress=not args.quiet)
    _print_summary(summary, out)
    return EXIT_OK


def _cmd_calibrate(args: argparse.Namespace) -> int:
    from .pipeline import calibrate

    out = args.out
    summary = calibrate(args.file, out, progress=not args.quiet)
    _print_summary(summary, Path(summary.get("output_folder", out or ".")))
    return EXIT_OK


def _cmd_resume(args: argparse.Namespace) -> int:
    from .pipeline import resume

    summary = resume(args.folder, progress=not args.quiet)
    _print_summary(summary, Path(args.folder))
    return EXIT_OK


def _cmd_report(args: argparse.Namespace) -> int:
    from .report import rebuild_report

    summary = rebuild_report(args.folder)
    _print_summary(summary, Path(args.folder))
    return EXIT_OK


def _print_summary(summary: dict, out: Path) -> None:
    best = summary.get("best_reduced_chi2")
    print(f"output folder: {out}")
    print(f"trials: {summary.get('n_trials')} ({summary.get('n_failed')} failed); "
          f"stop reason: {summary.get('stop_reason')}")
    if best is not None:
        print(f"best reduced chi-square: {best:.4g}")
    for name, value in (summary.get("best_coefficients") or {}).items():
        print(f"  {name} = {value:.6g}")
    from .posterior.verdicts import terminal_lines

    for line in terminal_lines(summary.get("checks") or []):
        print(line)
    if summary.get("report"):
        print(f"report: {out / summary['report']}")


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="profshape",
        description="Calibrate the anomalous electron-transport profile of a Hall-effect-thruster "
                    "discharge model against measured ion velocities by Bayesian optimisation.",
    )
    parser.add_argument("--version", action="version", version=f"profshape {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    demo = sub.add_parser("demo", help="run the whole job on the bundled (synthetic) demo data",
                          description="Search, posterior, bands, predictions, figures and a report "
                                      "on the bundled demo with the built-in solver.")
    demo.add_argument("--out", help="output folder (default: a new profshape-demo-* folder here)")
    demo.add_argument("--budget", type=int, help="number of forward-model trials (default 36)")
    demo.add_argument("--seed", type=int, help="random seed (default 0)")
    demo.add_argument("--workers", type=int, help="parallel worker processes (default 2)")
    demo.add_argument("--quiet", action="store_true", help="no progress bar")
    demo.set_defaults(func=_cmd_demo)

    cal = sub.add_parser("calibrate", help="calibrate as described by a TOML calibration file",
                         description="Run the calibration described by FILE.toml (see the README's "
                                     "calibration-file reference).")
    cal.add_argument("file", help="calibration file (TOML)")
    cal.add_argument("--out", help="output folder (default: [output] folder, or a new folder here)")
    cal.add_argument("--quiet", action="store_true", help="no progress bar")
    cal.set_defaults(func=_cmd_calibrate)

    res = sub.add_parser("resume", help="continue an interrupted calibration from its trial log",
                         description="Continue the calibration in FOLDER: completed trials are "
                                     "kept, those in flight are re-run.")
    res.add_argument("folder", help="output folder of the calibration")
    res.add_argument("--quiet", action="store_true", help="no progress bar")
    res.set_defaults(func=_cmd_resume)

    rep = sub.add_parser("report", help="rebuild figures and report from a calibration folder",
                         description="Rebuild the figures, summary and report of FOLDER from its "
                                     "files, without running any forward model.")
    rep.add_argument("folder", help="output folder of the calibration")
    rep.set_defaults(func=_cmd_report)

    try:
        from .solver.command import add_parser as add_solve_parser
    except ImportError:  # pragma: no cover - solver always ships
        pass
    else:
        add_solve_parser(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``profshape`` console script; returns the exit code."""
    parser = _parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return EXIT_BAD_INPUT
    try:
        return int(args.func(args))
    except KeyboardInterrupt:
        folder = getattr(args, "out", None) or getattr(args, "folder", None)
        hint = f" `profshape resume {folder}`" if folder else " `profshape resume <output folder>`"
        _err("interrupted; the trial log keeps every finished trial. Continue with" + hint + ".")
        return EXIT_INTERRUPTED
    except InputDataError as exc:
        _err(str(exc))
        return EXIT_BAD_INPUT
    except Exception as exc:  # a failure of the run: say what, not a traceback
        _err(f"the run failed: {type(exc).__name__}: {exc}")
        if "PROFSHAPE_DEBUG" in __import__("os").environ:
            raise
        return EXIT_FAILURE


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
