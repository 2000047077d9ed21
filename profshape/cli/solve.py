"""The ``profshape solve`` command: one solver run from a TOML case file."""

from __future__ import annotations

import argparse
import json
import sys
import tomllib
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..exceptions import ConfigError, InputDataError

if TYPE_CHECKING:
    from ..operating_point import OperatingPoint
    from ..profile import AnomalousProfile
    from ..solver.device import Device
    from ..solver.settings import SolverSettings

__all__ = ["add_parser", "load_case", "run_solve"]

_SECTIONS = ("device", "operating_point", "profile", "solver")


def add_parser(subparsers: Any) -> argparse.ArgumentParser:
    """Add the ``solve`` sub-command to an argparse ``subparsers`` object.

    The parser's ``func(args) -> int`` returns 0 when the solve converged,
    1 when it did not converge or failed, 2 for bad input.
    """
    p = subparsers.add_parser(
        "solve",
        help="solve one case with the built-in 1-D discharge solver",
        description=(
            "Solve one case with the built-in 1-D discharge solver. Without CASE, the demo "
            "device's first operating point with the default anomalous profile. CASE is a "
            "TOML file with optional [device] (and [device.magnetic_field]), "
            "[operating_point], [profile] and [solver] tables. Writes cells.csv (per-cell "
            "time averages) and globals.json into --out and prints the globals. Exit code: "
            "0 converged, 1 not converged or failed, 2 bad input."
        ),
    )
    p.add_argument("case", nargs="?", type=Path, help="TOML case file (optional)")
    p.add_argument("--out", type=Path, default=Path("solve_out"),
                   help="output folder (default: ./solve_out)")
    p.add_argument("--n-cells", type=int, default=None, help="override solver.n_cells")
    p.set_defaults(func=run_solve)
    return p


def load_case(path: Path | None
              ) -> tuple[Device, OperatingPoint, AnomalousProfile, SolverSettings]:
    """(device, point, profile, settings) from a TOML case file (or the demo case)."""
    from ..solver.config import (
        default_profile,
        device_from_mapping,
        point_from_mapping,
        profile_from_mapping,
        settings_from_mapping,
    )
    from ..solver.device import demo_device, demo_operating_points
    from ..solver.settings import SolverSettings

    if path is None:
        device = demo_device()
        return device, demo_operating_points()[0], default_profile(device), SolverSettings()
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError(f"case file {str(path)!r} not found.") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"case file {str(path)!r} is not valid TOML: {exc}") from None
    for key in data:
        if key not in _SECTIONS:
            raise ConfigError(
                f"{path}: unknown table [{key}]; allowed: {', '.join(_SECTIONS)}."
            )
    device = device_from_mapping(data.get("device", {}))
    point = point_from_mapping(data.get("operating_point", {}))
    profile = (
        profile_from_mapping(data["profile"], device)
        if "profile" in data
        else default_profile(device)
    )
    settings = settings_from_mapping(data.get("solver", {}))
    return device, point, profile, settings


def run_solve(args: argparse.Namespace) -> int:
    """Run ``profshape solve``; returns the exit code."""
    from ..solver.config import settings_from_mapping
    from ..solver.model import solve

    try:
        device, point, profile, settings = load_case(args.case)
        if args.n_cells is not None:
            settings = settings_from_mapping({**settings.to_dict(), "n_cells": args.n_cells})
        result = solve(device, point, profile, settings)
    except InputDataError as exc:
        print(f"profshape solve: bad input: {exc}", file=sys.stderr)
        return 2
    out = Path(args.out)
    try:
        out.mkdir(parents=True, exist_ok=True)
        result.cells.to_csv(out / "cells.csv", index=False)
        record = {
            "device": device.to_dict(),
            "operating_point": point.to_dict(),
            "profile": {"family": profile.family, "coefficients": dict(profile.coefficients)},
            "solver": settings.to_dict(),
            "globals": result.globals,
        }
        (out / "globals.json").write_text(json.dumps(record, indent=2, default=float) + "\n")
    except OSError as exc:
        print(f"profshape solve: cannot write to {str(out)!r}: {exc}", file=sys.stderr)
        return 2
    width = max(len(k) for k in result.globals)
    for key, value in result.globals.items():
        text = f"{value:.6g}" if isinstance(value, float) else str(value)
        print(f"{key:<{width}}  {text}")
    print(f"wrote {out / 'cells.csv'} and {out / 'globals.json'}")
    return 0 if result.status == "ok" else 1
