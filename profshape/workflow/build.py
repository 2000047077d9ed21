"""Objects built from a calibration file: data set, device, shape family, forward model, settings.

Every builder names the file and key of what is wrong (:class:`ConfigError`),
before any forward run. :func:`build_calibration` puts them together;
:func:`report_inputs` builds only what the report needs (no forward model).
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..config import CalibrationConfig
from ..data import (
    DataSet,
    OperatingPointData,
    ScalarObservable,
    load_dataset,
    read_ion_velocity_table,
)
from ..exceptions import ConfigError, ImplausibleValueWarning, InputDataError, ProfshapeWarning
from ..forward.base import ForwardModel
from ..likelihood import LikelihoodSettings
from ..operating_point import OperatingPoint
from ..problem import CalibrationProblem
from ..shapes import ShapeFamily, get_family

__all__ = [
    "Calibration",
    "ReportInputs",
    "build_calibration",
    "build_dataset",
    "build_device",
    "build_family",
    "build_forward_model",
    "posterior_settings",
    "prediction_points",
    "report_inputs",
    "search_settings",
]

_REQUIRED_DEVICE_KEYS = ("channel_length_m", "inner_radius_m", "outer_radius_m", "domain_length_m",
                         "magnetic_field")


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
        shown = re.sub(r"\[(\d+)\]", lambda m: f"[{int(m.group(1)) + 1}]", key)  # from 1
        warnings.warn(f"{cfg.path}: {shown} gives no propellant; using xenon. Write "
                      "propellant = \"xenon\" (or another) to silence this.",
                      ProfshapeWarning, stacklevel=3)
        return "xenon"
    return entry["propellant"]


# ----------------------------------------------------------------- building
def build_dataset(cfg: CalibrationConfig) -> DataSet:
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


def prediction_points(cfg: CalibrationConfig) -> list[OperatingPoint]:
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


def build_device(cfg: CalibrationConfig) -> Any:
    from ..solver import demo_device
    from ..solver.config import device_from_mapping

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


def build_family(cfg: CalibrationConfig, device: Any) -> ShapeFamily:
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


def build_forward_model(cfg: CalibrationConfig, device: Any, out_dir: Path) -> ForwardModel:
    fm = cfg.section("forward_model")
    if fm["kind"] == "builtin":
        from ..forward.builtin import BuiltinSolverModel
        from ..solver.config import settings_from_mapping

        try:
            settings = settings_from_mapping(fm["solver"], where="forward_model.solver")
        except InputDataError as exc:
            raise ConfigError(f"{cfg.path}: {exc}") from None
        model: ForwardModel = BuiltinSolverModel(device, settings)
    else:
        from ..forward.external import ExternalModel

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
        from ..forward.cache import CachedModel

        model = CachedModel(model, out_dir / "cache")
    return model


def _external_grid(cfg: CalibrationConfig, device: Any) -> np.ndarray:
    """The profile grid written for an external program: ``grid_z_m`` and ``grid_points``.

    Without ``grid_z_m`` the range is the device's anode-to-cathode length, or
    else the adapter's default (0 to 0.0625 m); ``grid_points`` always applies.
    """
    from ..forward.external import DEFAULT_GRID_M

    fm = cfg.section("forward_model")
    if fm["grid_z_m"] is not None:
        z0, z1 = (float(v) for v in fm["grid_z_m"])
    elif device is not None:
        z0, z1 = 0.0, float(device.domain_length_m)
    else:
        z0, z1 = float(DEFAULT_GRID_M[0]), float(DEFAULT_GRID_M[-1])
    return np.linspace(z0, z1, fm["grid_points"])


def _split_discrepancy(table: Any) -> dict[str, Any]:
    from ..observables import split_discrepancy

    return split_discrepancy(table)


def _check_observables(cfg: CalibrationConfig, dataset: DataSet, model: ForwardModel) -> None:
    """Scalar names of the data against what the forward model can produce."""
    from ..config import did_you_mean
    from ..data import SCALAR_UNITS

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
    from ..observables import check_producible  # profile observables (plasma potential, ...)

    check_producible(dataset, model)


def posterior_settings(cfg: CalibrationConfig, problem: CalibrationProblem, seed: int) -> Any:
    """The ``[posterior]`` settings, checked now (before any forward run)."""
    from ..posterior import PosteriorSettings

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


def search_settings(cfg: CalibrationConfig, problem: CalibrationProblem, progress: bool) -> Any:
    from ..search import SearchSettings

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
        from ..workers import slots_in_flight

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
    device = build_device(cfg)
    dataset = build_dataset(cfg)
    family = build_family(cfg, device)
    from ..closure_config import closure_from_config  # [closure]: coefficients vary with the point

    family, closure = closure_from_config(cfg, family, dataset.operating_points)
    model = build_forward_model(cfg, device, out_dir)
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
    from ..plausibility import check_plausible

    for message in check_plausible(dataset):
        warnings.warn(f"{cfg.path}: {message}", ImplausibleValueWarning, stacklevel=2)
    search = search_settings(cfg, problem, progress)
    return Calibration(cfg, problem, device, search, prediction_points(cfg),
                       posterior_settings(cfg, problem, search.seed))




@dataclass(frozen=True)
class ReportInputs:
    """What the report renders besides the output folder's files (no forward model).

    Attributes
    ----------
    config : CalibrationConfig or None
        The calibration file (its title and figure formats).
    family : ShapeFamily
    dataset : DataSet
    device : profshape.solver.Device or None
    names : tuple of str
        The searched parameters' names, in the trial log's order.
    """

    config: CalibrationConfig | None
    family: ShapeFamily
    dataset: DataSet
    device: Any
    names: tuple[str, ...]

    @classmethod
    def of(cls, cal: Calibration) -> ReportInputs:
        """The report's inputs of a built calibration."""
        return cls(cal.config, cal.problem.family, cal.problem.dataset, cal.device,
                   tuple(cal.problem.names))


def report_inputs(out_dir: str | Path) -> ReportInputs:
    """Data set, family, device and names from an output folder, without a forward model.

    Raises
    ------
    InputDataError
        If ``out_dir`` is not a calibration folder.
    """
    import pandas as pd

    from .folder import config_from_folder
    from .layout import TRIALS_FILE

    out = Path(out_dir)
    cfg = config_from_folder(out)
    device = build_device(cfg)
    family = build_family(cfg, device)
    dataset = build_dataset(cfg)
    columns = pd.read_parquet(out / TRIALS_FILE).columns
    names = tuple(c[3:] for c in columns if c.startswith("u__"))
    return ReportInputs(cfg, family, dataset, device, names)
