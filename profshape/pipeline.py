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
import math
import os
import time
import warnings
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
from .exceptions import (
    CampaignFailedError,
    ConfigError,
    FlatObjectiveWarning,
    ImplausibleValueWarning,
    InputDataError,
    ProfshapeWarning,
)
from .folder_lock import LOCK_FILE, lock_output_folder
from .forward.base import ForwardModel
from .likelihood import LikelihoodSettings
from .operating_point import OperatingPoint
from .problem import CalibrationProblem
from .shapes import ShapeFamily, get_family
from .trials import journal_path, sidecar_path

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
    posterior_settings : profshape.posterior.PosteriorSettings or None
        The ``[posterior]`` settings, checked before the first forward run
        (None when the posterior is disabled).
    """

    config: CalibrationConfig
    problem: CalibrationProblem
    device: Any
    search_settings: Any
    prediction_points: list[OperatingPoint]
    posterior_settings: Any = None


def _propellant(cfg: CalibrationConfig, key: str, entry: dict[str, Any]) -> str:
    """The point's propellant; xenon, with a warning, when the file names none."""
    if entry.get("propellant") is None:
        from .config import _one_based

        warnings.warn(f"{cfg.path}: {_one_based(key)} gives no propellant; using xenon. Write "
                      "propellant = \"xenon\" (or another) to silence this.",
                      ProfshapeWarning, stacklevel=3)
        return "xenon"
    return entry["propellant"]


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
                propellant=_propellant(cfg, key, entry),
                magnetic_field_scale=entry["magnetic_field_scale"],
                background_pressure_Pa=entry["background_pressure_Pa"],
                background_temperature_K=entry["background_temperature_K"],
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
                                      entry["anode_mass_flow_kg_s"],
                                      _propellant(cfg, f"posterior.predict[{i}]", entry),
                                      entry["magnetic_field_scale"],
                                      background_pressure_Pa=entry["background_pressure_Pa"],
                                      background_temperature_K=entry["background_temperature_K"]))
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
    elif shape["family"] != "scaled_reference" and "channel_length_m" not in options:
        warnings.warn(f"{cfg.path}: no [device] and no shape.options.channel_length_m: the "
                      f"default bounds of {shape['family']!r} assume a channel length of "
                      "0.025 m. Give options = { channel_length_m = ... } (your channel's "
                      "length [m]) or explicit bounds.", ProfshapeWarning, stacklevel=3)
    if shape["family"] == "scaled_reference":
        ref = options.pop("reference_file", None)
        if ref is None:
            raise cfg.error("shape.options.reference_file",
                            "is required for scaled_reference (a CSV with columns z_m, value).")
        import pandas as pd

        path = cfg.resolve("shape.options.reference_file", ref)
        try:
            table = pd.read_csv(path)
        except (OSError, UnicodeDecodeError, ValueError, pd.errors.ParserError) as exc:
            raise cfg.error("shape.options.reference_file",
                            f"{path} is not a readable CSV table ({type(exc).__name__}: {exc}); "
                            "give columns z_m, value.") from None
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
        grid = _external_grid(cfg, device)
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


def _external_grid(cfg: CalibrationConfig, device: Any) -> np.ndarray:
    """The profile grid written for an external program: ``grid_z_m`` and ``grid_points``.

    Without ``grid_z_m`` the range is the device's anode-to-cathode length, or
    else the adapter's default (0 to 0.0625 m); ``grid_points`` always applies.
    """
    from .forward.external import DEFAULT_GRID_M

    fm = cfg.section("forward_model")
    if fm["grid_z_m"] is not None:
        z0, z1 = (float(v) for v in fm["grid_z_m"])
    elif device is not None:
        z0, z1 = 0.0, float(device.domain_length_m)
    else:
        z0, z1 = float(DEFAULT_GRID_M[0]), float(DEFAULT_GRID_M[-1])
    return np.linspace(z0, z1, fm["grid_points"])


def _split_discrepancy(table: Any) -> dict[str, Any]:
    from .observables import split_discrepancy

    return split_discrepancy(table)


def _check_observables(cfg: CalibrationConfig, dataset: DataSet, model: ForwardModel) -> None:
    """Scalar names of the data against what the forward model can produce."""
    from .config import did_you_mean
    from .data import SCALAR_UNITS

    produced = getattr(model, "scalar_names", None)
    inner = getattr(model, "model", None)  # a cache wrapper
    if produced is None and inner is not None:
        produced = getattr(inner, "scalar_names", None)
    for i, point in enumerate(dataset):
        for name in point.scalars:
            if produced is not None and name not in produced:
                key = (f"operating_points[{i}].scalars.{name}" if cfg.data["operating_points"]
                       else "data_folder")
                raise cfg.error(key, f"the forward model does not produce a scalar {name!r}"
                                f"{did_you_mean(name, produced)}; it produces {sorted(produced)}.")
            if produced is None and name not in SCALAR_UNITS:
                hint = did_you_mean(name, SCALAR_UNITS)
                if hint:  # a near miss of a known name is a typo, not a new observable
                    key = (f"operating_points[{i}].scalars.{name}" if cfg.data["operating_points"]
                           else "data_folder")
                    raise cfg.error(key, f"unknown scalar {name!r}{hint}; the known ones are "
                                    f"{sorted(SCALAR_UNITS)}. Rename it, or give your program's "
                                    "name exactly as it writes it.")
    from .observables import check_producible  # profile observables (plasma potential, ...)

    check_producible(dataset, model)


def _posterior_settings(cfg: CalibrationConfig, problem: CalibrationProblem, seed: int) -> Any:
    """The ``[posterior]`` settings, checked now (before any forward run)."""
    import re

    from .posterior import PosteriorSettings

    post = cfg.section("posterior")
    if not post["enabled"]:
        return None
    keys = ("n_walkers", "n_steps", "burn_in", "thin", "n_gp_draws", "n_refine_rounds",
            "n_refine_draws", "n_check_draws")
    kwargs = {k: post[k] for k in keys if post[k] is not None}
    try:
        settings = PosteriorSettings(seed=post["seed"] if post["seed"] is not None else seed,
                                     band_levels=tuple(float(v) for v in post["band_levels"]),
                                     **kwargs)
    except InputDataError as exc:
        m = re.search(r"PosteriorSettings\.(\w+)", str(exc))
        raise cfg.error(f"posterior.{m.group(1) if m else 'enabled'}", str(exc)) from None
    d = problem.dim
    if settings.n_walkers < 2 * d:
        raise cfg.error("posterior.n_walkers",
                        f"must be at least 2 * d = {2 * d} for the {d} searched parameters (the "
                        f"ensemble sampler's requirement); got {settings.n_walkers}.")
    return settings


def _search_settings(cfg: CalibrationConfig, problem: CalibrationProblem, progress: bool) -> Any:
    from .search import SearchSettings

    s = dict(cfg.section("search"))
    s.pop("stop_after_failures", None)  # a run_search argument
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
    from .closure_config import closure_from_config  # [closure]: coefficients vary with the point

    family, closure = closure_from_config(cfg, family, dataset.operating_points)
    model = _forward_model(cfg, device, out_dir)
    lk = cfg.section("likelihood")
    try:
        likelihood = LikelihoodSettings(
            discrepancy_sigma_m_s=float(lk["discrepancy_sigma_m_s"]),
            scalar_discrepancy_relative=float(lk["scalar_discrepancy_relative"]),
            weights={k: float(v) for k, v in lk["weights"].items()},
            use_position_uncertainty=lk["use_position_uncertainty"],
            **_split_discrepancy(lk.get("discrepancy") or {}),  # per observable
        )
        problem = CalibrationProblem(
            family, dataset, model, likelihood,
            free_scale_per_point=lk["free_scale_per_point"],
            scale_bounds_log10=tuple(lk["scale_bounds_log10"]),
            discrepancy_bounds_m_s=tuple(lk["fit_discrepancy_m_s"]) if lk["fit_discrepancy_m_s"] else None,
            closure=closure,
        )
    except ConfigError:
        raise
    except InputDataError as exc:
        raise ConfigError(f"{cfg.path}: {exc}") from None
    _check_observables(cfg, dataset, model)
    from .plausibility import check_plausible

    for message in check_plausible(dataset):
        warnings.warn(f"{cfg.path}: {message}", ImplausibleValueWarning, stacklevel=2)
    search = _search_settings(cfg, problem, progress)
    return Calibration(cfg, problem, device, search, _prediction_points(cfg),
                       _posterior_settings(cfg, problem, search.seed))


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
            p.exists() for p in (out / TRIALS_FILE, sidecar_path(out / TRIALS_FILE),
                                 journal_path(out / TRIALS_FILE)))
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
    elif out.exists() and any(p.name != LOCK_FILE for p in out.iterdir()):
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
    try:
        info = json.loads(run_file.read_text(encoding="utf-8"))
        base_dir = info["base_dir"]
    except (OSError, UnicodeDecodeError, ValueError, KeyError, TypeError) as exc:
        raise InputDataError(
            f"{run_file} is damaged ({type(exc).__name__}: {exc}); it must hold the JSON that "
            "`profshape calibrate` wrote. Restore it, or start the calibration in a new --out."
        ) from None
    return parse_config(copy.read_text(encoding="utf-8"), path=copy, base_dir=base_dir)


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
    return None  # a local pool: run_search makes its own (and replaces it if a worker dies)


# ----------------------------------------------------------------- running
def _flat_objective(trials: Any) -> str | None:
    """Why the objective looks flat (every successful trial gave one misfit), or None."""
    ok = trials.loc[trials["status"] == "ok", "reduced_chi2"].to_numpy(dtype=float)
    ok = ok[np.isfinite(ok)]
    if ok.size < 3:
        return None
    spread = float(ok.max() - ok.min())
    # relative spread at rounding level (common practice, no source)
    if spread <= 1e-9 * max(1.0, float(np.abs(ok).max())):
        return (f"flat objective: all {ok.size} successful trials gave the same reduced "
                f"chi-square ({float(ok[0]):.6g}); the forward model's output does not depend on "
                "the coefficients, so the 'best fit' is arbitrary and no posterior was sampled. "
                "Check that the program reads the profile file it is given.")
    return None


def _failure_summary(trials: Any) -> str:
    """The most common failure reason of a log, with its count."""
    from .trials import reason_signature

    errors = [str(e) for e in trials.loc[trials["status"] != "ok", "error"]]
    if not errors:
        return ""
    counts: dict[str, tuple[int, str]] = {}
    for e in errors:
        sig = reason_signature(e)
        n, first = counts.get(sig, (0, e))
        counts[sig] = (n + 1, first)
    n, reason = max(counts.values(), key=lambda t: t[0])
    return f"{n} of {len(errors)} failed with: {reason[-1500:]}"


def run_calibration(cfg: CalibrationConfig, out_dir: str | Path, *, resume: bool = False,
                    progress: bool = True) -> dict[str, Any]:
    """Search, then posterior, bands, predictions, figures and report.

    The output folder is locked for the whole run (a second writer is refused;
    see :mod:`profshape.folder_lock`), and every section of the file is checked
    before the first forward run.

    Returns
    -------
    dict
        The summary (also written to ``summary.json``).

    Raises
    ------
    CampaignFailedError
        After the summary and report are written, when no trial succeeded or
        the posterior could not be computed.
    """
    from .report import finish
    from .search import run_search

    with lock_output_folder(out_dir), ExitStack() as stack:
        out = open_output_folder(cfg, out_dir, resume=resume)
        cal = build_calibration(cfg, out, progress=progress)
        executor = _executor(cfg, stack)
        limit = cfg.section("search")["stop_after_failures"] or None
        result = run_search(cal.problem, cal.search_settings, out / TRIALS_FILE,
                            executor=executor, resume=resume, max_same_failures=limit)
        flat = _flat_objective(result.trials) if result.best_trial is not None else None
        if flat:
            warnings.warn(flat, FlatObjectiveWarning, stacklevel=2)
        n_ok = int((result.trials["status"] == "ok").sum())
        if executor is None and cal.posterior_settings is not None and not flat \
                and n_ok >= cal.problem.dim + 2:  # the posterior will run: give it a pool
            from .executors import local_executor

            executor = stack.enter_context(local_executor(cfg.section("workers")["n_workers"]))
        summary = finish(cal, result, out, executor=executor, skip_posterior=flat)
    summary["output_folder"] = str(out)  # where it all went (the command line prints it)
    if result.best_trial is None or not math.isfinite(result.best_reduced_chi2):
        why = _failure_summary(result.trials)
        raise CampaignFailedError(
            f"no trial succeeded ({result.n_trials} trials, stop reason: {result.stop_reason}); "
            f"{why}. The log and report are in {out}; fix the cause, then start again."
        )
    if summary.get("posterior_error"):
        raise CampaignFailedError(
            f"the search finished (best reduced chi-square {result.best_reduced_chi2:.4g}, "
            f"trial {result.best_trial}) but the posterior could not be computed: "
            f"{summary['posterior_error']}. The summary and report of the search are in {out}."
        )
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
