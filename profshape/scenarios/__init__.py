"""Bundled scenarios besides the default demo (``profshape demo --scenario NAME``)."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

from ..exceptions import InputDataError

__all__ = ["SCENARIOS", "run_scenario", "scenario_config_text", "scenario_folder"]

#: Scenario name -> (folder inside the demo data, calibration file).
SCENARIOS: dict[str, tuple[str, str]] = {"pressure": ("pressure", "pressure.toml")}


def scenario_folder(name: str) -> Path:
    """The data folder of a bundled scenario."""
    from ..demo import demo_data_folder

    if name not in SCENARIOS:
        raise InputDataError(f"--scenario {name!r} is unknown; the scenarios are "
                             f"{['default', *SCENARIOS]}.")
    source = Path(__file__).resolve().parents[2] / "data_demo" / SCENARIOS[name][0]
    if (source / SCENARIOS[name][1]).exists():  # a source checkout: its own data
        return source
    return demo_data_folder() / SCENARIOS[name][0]


def scenario_config_text(name: str, budget: int | None = None, seed: int | None = None,
                         workers: int | None = None) -> tuple[str, Path]:
    """The scenario's calibration file with overrides, and its path."""
    path = scenario_folder(name) / SCENARIOS[name][1]
    text = path.read_text(encoding="utf-8")
    for key, value in (("budget", budget), ("seed", seed), ("n_workers", workers)):
        if value is not None:
            text, n = re.subn(rf"(?m)^{key}\s*=.*$", f"{key} = {int(value)}", text, count=1)
            if n != 1:  # pragma: no cover - the bundled files have these keys
                raise RuntimeError(f"{path.name} has no {key!r} line")
    return text, path


def run_scenario(name: str, out: str | Path, *, budget: int | None = None,
                 seed: int | None = None, workers: int | None = None, progress: bool = True
                 ) -> tuple[dict[str, Any], dict[str, Any]]:
    """Calibrate a bundled scenario into ``out``, then validate it (leave one point out).

    Returns
    -------
    (dict, dict)
        The calibration summary and the validation summary
        (:func:`profshape.validate.validate_run`).
    """
    from ..config import parse_config
    from ..validate import validate_run
    from ..workflow import run_calibration

    text, path = scenario_config_text(name, budget, seed, workers)
    cfg = parse_config(text, path=path, base_dir=path.parent)
    summary = run_calibration(cfg, out, progress=progress)
    return summary, validate_run(out)
