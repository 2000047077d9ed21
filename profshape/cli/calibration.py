"""The calibration commands: ``demo``, ``calibrate``, ``resume``, ``report``, ``init``,
``export`` and ``compare``."""

from __future__ import annotations

import argparse
import re
from pathlib import Path
from typing import Any

from ..demo import demo_data_folder
from ..exceptions import InputDataError
from ._common import EXIT_OK, print_summary

__all__ = ["add_parsers", "demo_config_text"]


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
    from ..config import parse_config
    from ..workflow import new_folder_name, run_calibration

    for name in ("budget", "workers"):
        v = getattr(args, name)
        if v is not None and v < 1:
            raise InputDataError(f"--{name} must be >= 1; got {v}.")
    if getattr(args, "scenario", "default") != "default":  # a bundled scenario, then validation
        from ..scenarios import run_scenario
        from ..validate import print_validation

        out = Path(args.out) if args.out else new_folder_name(f"profshape-{args.scenario}")
        summary, validation = run_scenario(args.scenario, out, budget=args.budget, seed=args.seed,
                                           workers=args.workers, progress=not args.quiet)
        print_summary(summary, out)
        print_validation(validation)
        return EXIT_OK
    text, folder = demo_config_text(args.budget, args.seed, args.workers)
    cfg = parse_config(text, path=folder / "demo.toml", base_dir=folder)
    out = Path(args.out) if args.out else new_folder_name("profshape-demo")
    summary = run_calibration(cfg, out, progress=not args.quiet)
    print_summary(summary, out)
    return EXIT_OK


def _cmd_calibrate(args: argparse.Namespace) -> int:
    from ..workflow import calibrate

    out = args.out
    summary = calibrate(args.file, out, progress=not args.quiet)
    print_summary(summary, Path(summary.get("output_folder", out or ".")))
    return EXIT_OK


def _cmd_resume(args: argparse.Namespace) -> int:
    from ..workflow import resume

    summary = resume(args.folder, progress=not args.quiet, budget=args.budget)
    print_summary(summary, Path(args.folder))
    return EXIT_OK


def _cmd_report(args: argparse.Namespace) -> int:
    from ..workflow import rebuild_report

    summary = rebuild_report(args.folder)
    print_summary(summary, Path(args.folder))
    return EXIT_OK


def _cmd_init(args: argparse.Namespace) -> int:
    from ..template import write_template

    path = write_template(args.file, "external" if args.external else "builtin", force=args.force)
    print(f"wrote {path}: fill in the data files and the {'command' if args.external else 'device'}, "
          f"then run `profshape calibrate {path}`")
    return EXIT_OK


def _cmd_export(args: argparse.Namespace) -> int:
    from ..workflow import export_closure

    formats = args.formats.split(",") if args.formats else ("csv", "json", "nc")
    for fmt, path in export_closure(args.folder, args.out, formats).items():
        print(f"{fmt}: {path}")
    return EXIT_OK


def _cmd_compare(args: argparse.Namespace) -> int:
    from ..workflow import compare_runs

    result = compare_runs(args.folders, args.out, criterion=args.criterion)
    print(result["text"], end="")
    print(f"written: {', '.join(str(p) for p in result['files'])}")
    return EXIT_OK


def add_parsers(sub: Any) -> None:
    """Add the calibration commands to an argparse ``subparsers`` object."""
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
