"""The whole job: build a calibration from its file, search, posterior, report.

An output folder holds everything a calibration needs to be resumed or
re-reported without the original file: ``calibration.toml`` (a copy of the
file), ``run.json`` (where relative paths resolve, a fingerprint of the file,
the package version), ``trials.parquet`` (the trial log) and, once finished,
the posterior, bands, predictions, figures, ``summary.json`` and ``report.md``.
"""

from __future__ import annotations

import hashlib
import json
import os
import time
from concurrent.futures import Executor
from contextlib import ExitStack
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ._version import __version__
from .config import CalibrationConfig, load_config, parse_config
from .data import (
    DataSet,
    OperatingPointData,
    ScalarObservable,
    load_dataset,
    read_ion_velocity_table,
)
from .exceptions import ConfigError, InputDataError
from .forward.base import ForwardModel
from .likelihood import LikelihoodSettings
from .operating_point import OperatingPoint
from .problem import CalibrationProblem
from .shapes import ShapeFamily, get_family
from .trials import sidecar_path

__all__ = [
    "Calibration",
    "build_calibration",
    "calibrate",
    "open_output_folder",
    "resume",
]

_REQUIRED_DEVICE_KEYS = ("channel_length_m", "inner_radius_m", "outer_radius_m", "domain_length_m",
                         "magnetic_field")
RUN_FILE = "run.json"
CONFIG_COPY = "calibration.toml"
TRIALS_FILE = "trials.parquet"


@dataclass
class Calibration:
    """Everything built from a calibration file, ready to run.

    Attributes
    ----------
    config : CalibrationConfig
    problem : CalibrationProblem
    device : profshape.solver.Device or None
        The built-in solver's device (None for an external model without one).
    search_settings : profshape.search.SearchSettings
    prediction_points : list of OperatingPoint
        Extra points (not in the data) to predict at.
    """

    config: CalibrationConfig
    problem: CalibrationProblem
    device: Any
    search_settings: Any
    prediction_points: list[OperatingPoint]


# ----------------------------------------------------------------- building
def _dataset(cfg: CalibrationConfig) -> DataSet:
    if cfg.data["data_folder"]:
        folder = cfg.resolve("data_folder", cfg.data["data_folder"])
        try:
            return load_dataset(folder)
        except InputDataError as exc:
            raise cfg.error("data_folder", str(exc)) from None
    points = []
    for i, entry in enumerate(cfg.data["operating_points"]):
        key = f"operating_points[{i}]"
        try:
            op = OperatingPoint(
                label=entry["label"],
                discharge_voltage_V=entry["discharge_voltage_V"],
                anode_mass_flow_kg_s=entry["anode_mass_flow_kg_s"],
                propellant=entry["propellant"],
                magnetic_field_scale=entry["magnetic_field_scale"],
            )
        except InputDataError as exc:
            raise cfg.error(key, str(exc)) from None
        velocity = None
        if entry["ion_velocity_file"]:
            path = cfg.resolve(f"{key}.ion_velocity_file", entry["ion_velocity_file"])
            velocity = read_ion_velocity_table(path)  # errors name the file, row and column
        scalars = {}
        for name, spec in entry["scalars"].items():
            skey = f"{key}.scalars.{name}"
            if not isinstance(spec, dict) or set(spec) - {"value", "sigma", "unit"} or \
                    not {"value", "sigma"} <= set(spec):
                raise cfg.error(skey, "must be a table {value = ..., sigma = ..., unit = ...} "
                                "(unit optional, SI).")
            try:
                scalars[name] = ScalarObservable(name, spec["value"], spec["sigma"], spec.get("unit", ""))
            except InputDataError as exc:
                raise cfg.error(skey, str(exc)) from None
        try:
            points.append(OperatingPointData(op, velocity, scalars))
        except InputDataError as exc:
            raise cfg.error(key, str(exc)) from None
    try:
        return DataSet(points)
    except InputDataError as exc:
        raise cfg.error("operating_points", str(exc)) from None


def _prediction_points(cfg: CalibrationConfig) -> list[OperatingPoint]:
    out = []
    for i, entry in enumerate(cfg.section("posterior").get("predict", [])):
        try:
            out.append(OperatingPoint(entry["label"], entry["discharge_voltage_V"],
                                      entry["anode_mass_flow_kg_s"], entry["propellant"],
                                      entry["magnetic_field_scale"]))
        except InputDataError as exc:
            raise cfg.error(f"posterior.predict[{i}]", str(exc)) from None
    return out


def _device(cfg: CalibrationConfig) -> Any:
    from .solver import demo_device
    from .solver.config import device_from_mapping

    section = cfg.section("device")
    if not section:
        if cfg.data["forward_model"]["kind"] == "builtin":
            raise cfg.error("device", "is required for the built-in solver (geometry and magnetic field).")
        return None
    if section.get("preset") == "demo" and len(section) == 1:
        return demo_device()
    missing = [k for k in _REQUIRED_DEVICE_KEYS if k not in section]
    if missing:
        raise cfg.error(f"device.{missing[0]}", f"is required (the [device] table needs "
                        f"{list(_REQUIRED_DEVICE_KEYS)}; or write preset = \"demo\" alone).")
    try:
        return device_from_mapping(section, where="device")
    except InputDataError as exc:
        raise ConfigError(f"{cfg.path}: {exc}") from None


def _family(cfg: CalibrationConfig, device: Any) -> ShapeFamily:
    shape = cfg.section("shape")
    options = dict(shape["options"])
    if device is not None:
        options.setdefault("channel_length_m", device.channel_length_m)
        if shape["family"] == "log_spline":
            options.setdefault("domain_length_m", device.domain_length_m)
    if shape["family"] == "scaled_reference":
        ref = options.pop("reference_file", None)
        if ref is None:
            raise cfg.error("shape.options.reference_file",
                            "is required for scaled_reference (a CSV with columns z_m, value).")
        import pandas as pd

        path = cfg.resolve("shape.options.reference_file", ref)
        table = pd.read_csv(path)
        if not {"z_m", "value"} <= set(table.columns):
            raise cfg.error("shape.options.reference_file",
                            f"{path} must have columns z_m and value; found {list(table.columns)}.")
        options.pop("channel_length_m", None)
        options.pop("domain_length_m", None)
        options["reference"] = (table["z_m"].to_numpy(), table["value"].to_numpy())
    try:
        family = get_family(shape["family"], **options)
        if shape["bounds"]:
            bounds = {}
            for name, pair in shape["bounds"].items():
                if not (isinstance(pair, list) and len(pair) == 2):
                    raise cfg.error(f"shape.bounds.{name}", f"must be [lower, upper]; got {pair!r}.")
                bounds[name] = tuple(pair)
            family = family.with_bounds(**bounds)
    except ConfigError:
        raise
    except InputDataError as exc:
        key = "shape.bounds" if shape["bounds"] and "bounds" in str(exc) else "shape.family"
        raise cfg.error(key, str(exc)) from None
    return family


def _forward_model(cfg: CalibrationConfig, device: Any, out_dir: Path) -> ForwardModel:
    fm = cfg.section("forward_model")
    if fm["kind"] == "builtin":
        from .forward.builtin import BuiltinSolverModel
        from .solver.config import settings_from_mapping

        try:
            settings = settings_from_mapping(fm["solver"], where="forward_model.solver")
        except InputDataError as exc:
            raise ConfigError(f"{cfg.path}: {exc}") from None
        model: ForwardModel = BuiltinSolverModel(device, settings)
    else:
        from .forward.external import ExternalModel

        command = [str(a) for a in fm["command"]]
        exe = command[0] if command else ""
        if exe and ("/" in exe or exe.startswith(".")):
            resolved = cfg.resolve("forward_model.command", exe)
            command[0] = str(resolved)
        if device is not None:
            grid = np.linspace(0.0, device.domain_length_m, fm["grid_points"])
        else:
            grid = None
        try:
            model = ExternalModel(command, base_dir=out_dir / "work", timeout_s=float(fm["timeout_s"]),
                                  retries=fm["retries"], grid_m=grid, version=fm["version"])
        except InputDataError as exc:
            raise cfg.error("forward_model.command", str(exc)) from None
        except Exception as exc:  # ForwardModelError: missing or non-executable program
            raise cfg.error("forward_model.command", str(exc)) from None
    if fm["cache"]:
        from .forward.cache import CachedModel

        model = CachedModel(model, out_dir / "cache")
    return model


def _search_settings(cfg: CalibrationConfig, problem: CalibrationProblem, progress: bool) -> Any:
    from .search import SearchSettings

    s = dict(cfg.section("search"))
    starts = []
    for i, start in enumerate(cfg.section("shape")["start"]):
        try:
            starts.append(problem.coefficient_dict(start))
        except InputDataError as exc:
            raise cfg.error(f"shape.start[{i}]", str(exc)) from None
    kwargs = {k: v for k, v in s.items() if v is not None}
    try:
        from .workers import slots_in_flight

        return SearchSettings(initial_points=starts or None, progress=progress,
                              n_workers=slots_in_flight(cfg.section("workers")), **kwargs)
    except InputDataError as exc:
        raise ConfigError(f"{cfg.path}: [search]: {exc}") from None


def build_calibration(cfg: CalibrationConfig, out_dir: str | Path, progress: bool = True) -> Calibration:
    """Build the problem and settings described by a calibration file.

    Raises
    ------
    ConfigError
        For anything wrong in the file or the files it names.
    """
    out_dir = Path(out_dir)
    device = _device(cfg)
    dataset = _dataset(cfg)
    family = _family(cfg, device)
    model = _forward_model(cfg, device, out_dir)
    lk = cfg.section("likelihood")
    try:
        likelihood = LikelihoodSettings(
            discrepancy_sigma_m_s=float(lk["discrepancy_sigma_m_s"]),
            scalar_discrepancy_relative=float(lk["scalar_discrepancy_relative"]),
            weights={k: float(v) for k, v in lk["weights"].items()},
            use_position_uncertainty=lk["use_position_uncertainty"],
        )
        problem = CalibrationProblem(
            family, dataset, model, likelihood,
            free_scale_per_point=lk["free_scale_per_point"],
            scale_bounds_log10=tuple(lk["scale_bounds_log10"]),
            discrepancy_bounds_m_s=tuple(lk["fit_discrepancy_m_s"]) if lk["fit_discrepancy_m_s"] else None,
        )
    except ConfigError:
        raise
    except InputDataError as exc:
        raise ConfigError(f"{cfg.path}: {exc}") from None
    return Calibration(cfg, problem, device, _search_settings(cfg, problem, progress),
                       _prediction_points(cfg))


# ----------------------------------------------------------- output folder
def _fingerprint(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def _atomic_json(path: Path, data: dict[str, Any]) -> None:
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_text(json.dumps(data, indent=2, default=str), encoding="utf-8")
    os.replace(tmp, path)


def open_output_folder(cfg: CalibrationConfig, out_dir: str | Path, resume: bool = False) -> Path:
    """Prepare ``out_dir`` for this calibration, refusing to clobber another one.

    Raises
    ------
    InputDataError
        If the folder cannot be written, or holds a different calibration.
    """
    out = Path(out_dir)
    run_file = out / RUN_FILE
    fp = _fingerprint(cfg.text)
    if out.exists() and not out.is_dir():
        raise InputDataError(f"output folder {out} exists and is not a folder; choose another --out.")
    if run_file.exists():
        try:
            info = json.loads(run_file.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            raise InputDataError(f"{run_file} is unreadable; choose another output folder.") from None
        # a start refused for bad input before any search began holds no result: reuse it
        refused_start = not resume and not any(
            p.exists() for p in (out / TRIALS_FILE, sidecar_path(out / TRIALS_FILE)))
        if info.get("fingerprint") != fp and not refused_start:
            raise InputDataError(
                f"output folder {out} holds another calibration (its {CONFIG_COPY} differs); "
                "choose a new --out, or `profshape resume` that folder."
            )
        if not resume and (out / TRIALS_FILE).exists():
            raise InputDataError(
                f"output folder {out} already holds this calibration's trials; use "
                f"`profshape resume {out}` to continue it, or choose a new --out."
            )
        if info.get("fingerprint") == fp:
            return out
    elif out.exists() and any(out.iterdir()):
        raise InputDataError(
            f"output folder {out} is not empty and holds no calibration; choose a new or empty --out."
        )
    try:
        out.mkdir(parents=True, exist_ok=True)
        probe = out / ".write-test"
        probe.write_text("")
        probe.unlink()
    except OSError as exc:
        raise InputDataError(
            f"output folder {out} is not writable ({exc.strerror}); choose another --out."
        ) from None
    (out / CONFIG_COPY).write_text(cfg.text, encoding="utf-8")
    _atomic_json(run_file, {"fingerprint": fp, "base_dir": str(cfg.base_dir),
                            "source": str(cfg.path), "version": __version__,
                            "created": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())})
    return out


def config_from_folder(out_dir: str | Path) -> CalibrationConfig:
    """The calibration file stored in an output folder (paths resolve as originally)."""
    out = Path(out_dir)
    run_file, copy = out / RUN_FILE, out / CONFIG_COPY
    if not run_file.exists() or not copy.exists():
        raise InputDataError(
            f"{out} is not a calibration folder (no {RUN_FILE} and {CONFIG_COPY}); give the folder "
            "that `profshape calibrate` or `profshape demo` wrote."
        )
    info = json.loads(run_file.read_text(encoding="utf-8"))
    return parse_config(copy.read_text(encoding="utf-8"), path=copy, base_dir=info["base_dir"])


# --------------------------------------------------------------- executors
def _executor(cfg: CalibrationConfig, stack: ExitStack) -> Executor | None:
    workers = cfg.section("workers")
    if workers.get("kind", "local") != "local":  # SLURM / PBS through dask-jobqueue
        from .workers import executor_for_config

        return executor_for_config(cfg, stack)
    if workers["scheduler_address"]:
        from distributed import Client

        from .executors import dask_executor

        try:
            client = stack.enter_context(Client(workers["scheduler_address"], timeout="20s"))
        except OSError as exc:
            raise cfg.error("workers.scheduler_address", f"cannot reach the dask scheduler: {exc}") from None
        return dask_executor(client)
    if workers["n_workers"] <= 1:
        from .executors import InlineExecutor

        return InlineExecutor()
    from .executors import local_executor

    return stack.enter_context(local_executor(workers["n_workers"]))


# ----------------------------------------------------------------- running
def run_calibration(cfg: CalibrationConfig, out_dir: str | Path, *, resume: bool = False,
                    progress: bool = True) -> dict[str, Any]:
    """Search, then posterior, bands, predictions, figures and report.

    Returns
    -------
    dict
        The summary (also written to ``summary.json``).
    """
    from .report import finish
    from .search import run_search

    out = open_output_folder(cfg, out_dir, resume=resume)
    cal = build_calibration(cfg, out, progress=progress)
    with ExitStack() as stack:
        executor = _executor(cfg, stack)
        result = run_search(cal.problem, cal.search_settings, out / TRIALS_FILE,
                            executor=executor, resume=resume)
        summary = finish(cal, result, out, executor=executor)
    summary["output_folder"] = str(out)  # where it all went (the command line prints it)
    return summary


def calibrate(path: str | Path, out_dir: str | Path | None = None, *, progress: bool = True
              ) -> dict[str, Any]:
    """Run the calibration described by the file at ``path`` into ``out_dir``."""
    cfg = load_config(path)
    out = out_dir or cfg.section("output").get("folder") or new_folder_name()
    if not Path(out).is_absolute() and out_dir is None and cfg.section("output").get("folder"):
        out = cfg.base_dir / out
    return run_calibration(cfg, out, progress=progress)


def resume(out_dir: str | Path, *, progress: bool = True, budget: int | None = None
           ) -> dict[str, Any]:
    """Continue an interrupted calibration from its trial log.

    With ``budget``, extend the run to that many trials in all (also a finished
    one; see :mod:`profshape.extend`); the posterior and outputs are redone.
    """
    cfg = config_from_folder(out_dir)
    if budget is not None:
        from .extend import extend_budget

        extend_budget(cfg, out_dir, budget)
    return run_calibration(cfg, out_dir, resume=True, progress=progress)


def new_folder_name(prefix: str = "profshape-run") -> Path:
    """A new, unused folder name in the working directory."""
    stamp = time.strftime("%Y%m%d-%H%M%S")
    path = Path.cwd() / f"{prefix}-{stamp}"
    n = 1
    while path.exists():
        n += 1
        path = Path.cwd() / f"{prefix}-{stamp}-{n}"
    return path
