"""The ``profshape`` command line.

Exit codes: 0 success, 2 bad input (the message says what and where; also an
output folder that another process is writing), 1 a failure of the run itself
(including a calibration in which no trial succeeded, or whose posterior could
not be computed: the summary and report are written first), 130 interrupted
(Ctrl-C) and 143 terminated (SIGTERM); after either, the trial log keeps what
was done and ``profshape resume DIR`` continues.
"""

from __future__ import annotations

import argparse
import contextlib
import re
import signal
import sys
import warnings
from collections.abc import Iterator, Sequence
from pathlib import Path

from ._version import __version__
from .demo import demo_data_folder
from .exceptions import CampaignFailedError, InputDataError, ProfshapeWarning

__all__ = ["main"]

EXIT_OK, EXIT_FAILURE, EXIT_BAD_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130
EXIT_TERMINATED = 128 + signal.SIGTERM


class _Terminated(KeyboardInterrupt):
    """SIGTERM, handled like Ctrl-C (the run unwinds, pools close, the log is kept)."""


def _on_sigterm(signum: int, frame: object) -> None:
    raise _Terminated()


@contextlib.contextmanager
def _signals_and_warnings() -> Iterator[None]:
    """SIGTERM stops like Ctrl-C; profshape warnings print as one ``profshape: warning:`` line."""
    previous = None
    with contextlib.suppress(ValueError):  # not in the main thread: leave SIGTERM alone
        previous = signal.signal(signal.SIGTERM, _on_sigterm)
    shown = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):
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


def _err(message: str) -> None:
    one_line = " ".join(str(message).splitlines())  # a library's multi-line text on one line
    print(f"profshape: error: {one_line}", file=sys.stderr)


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
    if getattr(args, "scenario", "default") != "default":  # a bundled scenario, then validation
        from .scenarios import run_scenario
        from .validate import print_validation

        out = Path(args.out) if args.out else new_folder_name(f"profshape-{args.scenario}")
        summary, validation = run_scenario(args.scenario, out, budget=args.budget, seed=args.seed,
                                           workers=args.workers, progress=not args.quiet)
        _print_summary(summary, out)
        print_validation(validation)
        return EXIT_OK
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

    summary = resume(args.folder, progress=not args.quiet, budget=args.budget)
    _print_summary(summary, Path(args.folder))
    return EXIT_OK


def _cmd_report(args: argparse.Namespace) -> int:
    from .report import rebuild_report

    summary = rebuild_report(args.folder)
    _print_summary(summary, Path(args.folder))
    return EXIT_OK


def _cmd_init(args: argparse.Namespace) -> int:
    from .template import write_template

    path = write_template(args.file, "external" if args.external else "builtin", force=args.force)
    print(f"wrote {path}: fill in the data files and the {'command' if args.external else 'device'}, "
          f"then run `profshape calibrate {path}`")
    return EXIT_OK


def _cmd_export(args: argparse.Namespace) -> int:
    from .export import export_closure

    formats = args.formats.split(",") if args.formats else ("csv", "json", "nc")
    for fmt, path in export_closure(args.folder, args.out, formats).items():
        print(f"{fmt}: {path}")
    return EXIT_OK


def _cmd_compare(args: argparse.Namespace) -> int:
    from .compare_runs import compare_runs

    result = compare_runs(args.folders, args.out, criterion=args.criterion)
    print(result["text"], end="")
    print(f"written: {', '.join(str(p) for p in result['files'])}")
    return EXIT_OK


def _print_summary(summary: dict, out: Path) -> None:
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
    demo.add_argument("--scenario", default="default", choices=("default", "pressure"),
                      help="bundled scenario: default (two voltages) or pressure (3 background "
                           "pressures x 2 voltages, closure, then leave-one-point-out validation)")
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
    res.add_argument("--budget", type=int, help="extend the run to this many trials in all "
                     "(also a finished run; the posterior and report are redone)")
    res.add_argument("--quiet", action="store_true", help="no progress bar")
    res.set_defaults(func=_cmd_resume)

    rep = sub.add_parser("report", help="rebuild figures and report from a calibration folder",
                         description="Rebuild the figures, summary and report of FOLDER from its "
                                     "files, without running any forward model.")
    rep.add_argument("folder", help="output folder of the calibration")
    rep.set_defaults(func=_cmd_report)

    ini = sub.add_parser("init", help="write a commented calibration-file template",
                         description="Write a calibration file with every key, commented, to fill "
                                     "in (for the built-in solver, or --external for your program).")
    ini.add_argument("file", help="file to write, e.g. my_thruster.toml")
    ini.add_argument("--external", action="store_true", help="for an external program")
    ini.add_argument("--force", action="store_true", help="overwrite an existing file")
    ini.set_defaults(func=_cmd_init)

    exp = sub.add_parser("export", help="export the calibrated profile for other codes",
                         description="Write z, the Bohm-like coefficient and the collision frequency "
                                     "[1/s] (best, median, bands), the magnetic field and the "
                                     "operating points of FOLDER as CSV, JSON and netCDF.")
    exp.add_argument("folder", help="output folder of the calibration")
    exp.add_argument("--out", help="folder to write into (default FOLDER/export)")
    exp.add_argument("--formats", help="comma-separated subset of csv,json,nc (default all)")
    exp.set_defaults(func=_cmd_export)

    cmp_ = sub.add_parser("compare", help="rank the shape families of finished runs",
                          description="Table (BIC, Laplace evidence, best reduced chi-square, "
                                      "intervals) and figure of runs fitted to the same data.")
    cmp_.add_argument("folders", nargs="+", help="output folders of the calibrations")
    cmp_.add_argument("--out", help="folder for the table and figure (default a new "
                      "profshape-compare-* folder here)")
    cmp_.add_argument("--criterion", default="bic", choices=("bic", "aic", "laplace"),
                      help="what the ranking sorts on (default bic)")
    cmp_.set_defaults(func=_cmd_compare)

    from .validate import add_parser as add_validate_parser  # profshape validate RUN

    add_validate_parser(sub)
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
        with _signals_and_warnings():
            return int(args.func(args))
    except KeyboardInterrupt as exc:
        folder = getattr(args, "out", None) or getattr(args, "folder", None)
        hint = f" `profshape resume {folder}`" if folder else " `profshape resume <output folder>`"
        what = "terminated (SIGTERM)" if isinstance(exc, _Terminated) else "interrupted"
        _err(f"{what}; the trial log keeps every finished trial. Continue with" + hint + ".")
        return EXIT_TERMINATED if isinstance(exc, _Terminated) else EXIT_INTERRUPTED
    except CampaignFailedError as exc:
        _err(str(exc))
        return EXIT_FAILURE
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
