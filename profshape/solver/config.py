"""Build solver objects from plain mappings (parsed TOML tables).

Used by ``profshape solve`` and reusable by the calibration-file reader.
Every problem raises :class:`~profshape.exceptions.ConfigError` (an
:class:`~profshape.exceptions.InputDataError`) naming the table and key.

Tables
------
``[device]``
    ``name``, ``channel_length_m``, ``inner_radius_m``, ``outer_radius_m``,
    ``domain_length_m``, ``anode_temperature_K``,
    ``cathode_electron_temperature_eV`` and a ``[device.magnetic_field]``
    subtable with either ``peak_T``, ``peak_z_m``, ``width_upstream_m``,
    ``width_downstream_m`` (bell-shaped field) or ``z_m`` and ``B_T`` arrays.
    Missing keys take the demo device's values.
``[operating_point]``
    ``label``, ``discharge_voltage_V``, ``anode_mass_flow_kg_s``,
    ``propellant``, ``magnetic_field_scale``, ``background_pressure_Pa``,
    ``background_temperature_K``; missing keys take the first demo
    point's values.
``[profile]``
    ``family`` (a shape family name, see :func:`profshape.shapes.get_family`),
    ``coefficients = {name = value}`` (all of the family's coefficients) and
    optional ``options = {...}`` passed to the family.
``[solver]``
    Any field of :class:`~profshape.solver.SolverSettings`.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from typing import Any

from ..exceptions import ConfigError, InputDataError
from ..operating_point import OperatingPoint
from ..profile import AnomalousProfile
from .device import Device, demo_device, demo_operating_points
from .magnetic import BellField, TabulatedField
from .settings import SolverSettings

__all__ = [
    "default_profile",
    "device_from_mapping",
    "point_from_mapping",
    "profile_from_mapping",
    "settings_from_mapping",
]

_DEVICE_KEYS = (
    "name",
    "channel_length_m",
    "inner_radius_m",
    "outer_radius_m",
    "domain_length_m",
    "anode_temperature_K",
    "cathode_electron_temperature_eV",
    "magnetic_field",
)
_BELL_KEYS = ("peak_T", "peak_z_m", "width_upstream_m", "width_downstream_m")
_TABLE_KEYS = ("z_m", "B_T")
_POINT_KEYS = (
    "label",
    "discharge_voltage_V",
    "anode_mass_flow_kg_s",
    "propellant",
    "magnetic_field_scale",
    "background_pressure_Pa",
    "background_temperature_K",
)

#: Coefficients of the default profile (a smooth step, Bohm-like coefficient):
#: 10^-2.5 inside the channel, 10^-1 in the near plume, transition at the
#: channel exit over 8 % of the channel length.
DEFAULT_PROFILE_COEFFICIENTS = {
    "log10_inner_level": -2.5,
    "log10_outer_level": -1.0,
    "transition_z_m": 1.0,  # in channel lengths
    "transition_width_m": 0.08,  # in channel lengths
}


def _mapping(value: Any, where: str) -> Mapping[str, Any]:
    if not isinstance(value, Mapping):
        raise ConfigError(f"[{where}] must be a table; got {type(value).__name__}.")
    return value


def _check_keys(mapping: Mapping[str, Any], allowed: tuple[str, ...], where: str) -> None:
    for key in mapping:
        if key not in allowed:
            raise ConfigError(
                f"[{where}] unknown key {key!r}; allowed keys: {', '.join(allowed)}."
            )


def _number(value: Any, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ConfigError(f"{key} must be a number; got {value!r}.")
    return float(value)


def _reraise(exc: InputDataError, where: str) -> ConfigError:
    return ConfigError(f"[{where}] {exc}")


def device_from_mapping(mapping: Mapping[str, Any], where: str = "device") -> Device:
    """A :class:`Device` from a ``[device]`` table (missing keys: demo values).

    Raises
    ------
    ConfigError
        For an unknown key, a wrong type or an invalid value, naming the key.
    """
    mapping = _mapping(mapping, where)
    _check_keys(mapping, _DEVICE_KEYS, where)
    base = demo_device()
    kwargs: dict[str, Any] = {}
    for key in _DEVICE_KEYS:
        if key in ("name", "magnetic_field"):
            continue
        kwargs[key] = (
            _number(mapping[key], f"{where}.{key}") if key in mapping else getattr(base, key)
        )
    kwargs["name"] = str(mapping.get("name", base.name if not mapping else "device"))
    if "magnetic_field" in mapping:
        kwargs["magnetic_field"] = _field_from_mapping(
            mapping["magnetic_field"], f"{where}.magnetic_field"
        )
    else:
        kwargs["magnetic_field"] = base.magnetic_field
    try:
        return Device(**kwargs)
    except InputDataError as exc:
        raise _reraise(exc, where) from None


def _field_from_mapping(value: Any, where: str) -> BellField | TabulatedField:
    mapping = _mapping(value, where)
    keys = set(mapping)
    try:
        if keys & set(_TABLE_KEYS):
            _check_keys(mapping, _TABLE_KEYS, where)
            missing = [k for k in _TABLE_KEYS if k not in mapping]
            if missing:
                raise ConfigError(f"[{where}] missing key {missing[0]!r} (give z_m and B_T).")
            for k in _TABLE_KEYS:
                if not isinstance(mapping[k], list | tuple):
                    raise ConfigError(f"{where}.{k} must be an array of numbers.")
                for v in mapping[k]:
                    _number(v, f"{where}.{k}")
            return TabulatedField(mapping["z_m"], mapping["B_T"])
        _check_keys(mapping, _BELL_KEYS, where)
        missing = [k for k in _BELL_KEYS if k not in mapping]
        if missing:
            raise ConfigError(
                f"[{where}] missing key {missing[0]!r}; give {', '.join(_BELL_KEYS)} "
                "(bell-shaped field) or z_m and B_T arrays."
            )
        return BellField(**{k: _number(mapping[k], f"{where}.{k}") for k in _BELL_KEYS})
    except ConfigError:
        raise
    except InputDataError as exc:
        raise _reraise(exc, where) from None


def point_from_mapping(mapping: Mapping[str, Any], where: str = "operating_point") -> OperatingPoint:
    """An :class:`~profshape.OperatingPoint` from a table (missing keys: first demo point)."""
    mapping = _mapping(mapping, where)
    _check_keys(mapping, _POINT_KEYS, where)
    base = demo_operating_points()[0].to_dict()
    kwargs: dict[str, Any] = {}  # str for label and propellant, float for the rest
    for key in _POINT_KEYS:
        value = mapping.get(key, base[key])
        if key in ("label", "propellant"):
            if not isinstance(value, str):
                raise ConfigError(f"{where}.{key} must be a string; got {value!r}.")
            kwargs[key] = value
        else:
            kwargs[key] = _number(value, f"{where}.{key}")
    try:
        return OperatingPoint(**kwargs)
    except InputDataError as exc:
        raise _reraise(exc, where) from None


def settings_from_mapping(mapping: Mapping[str, Any], where: str = "solver") -> SolverSettings:
    """:class:`SolverSettings` from a ``[solver]`` table (missing keys: defaults).

    Raises
    ------
    ConfigError
        For an unknown key, a wrong type or an out-of-range value, naming the key.
    """
    mapping = _mapping(mapping, where)
    names = tuple(f.name for f in dataclasses.fields(SolverSettings))
    _check_keys(mapping, names, where)
    for key, value in mapping.items():
        if key == "wall_material":
            if not isinstance(value, str):
                raise ConfigError(f"{where}.{key} must be a string; got {value!r}.")
            continue
        _number(value, f"{where}.{key}")
    try:
        return SolverSettings(**dict(mapping))
    except InputDataError as exc:
        raise _reraise(exc, where) from None


def default_profile(device: Device | None = None) -> AnomalousProfile:
    """The default anomalous profile: a smooth step of the Bohm-like coefficient.

    10^-2.5 inside the channel, 10^-1 in the near plume, with the transition
    at the channel exit (width 8 % of the channel length), built with the
    ``smooth_step`` shape family.
    """
    from ..shapes import get_family

    device = demo_device() if device is None else device
    length = device.channel_length_m
    family = get_family("smooth_step", channel_length_m=length)
    c = DEFAULT_PROFILE_COEFFICIENTS
    coeffs = [
        c["log10_inner_level"],
        c["log10_outer_level"],
        c["transition_z_m"] * length,
        c["transition_width_m"] * length,
    ]
    return family.profile(coeffs)


def profile_from_mapping(
    mapping: Mapping[str, Any], device: Device | None = None, where: str = "profile"
) -> AnomalousProfile:
    """An :class:`~profshape.AnomalousProfile` from a ``[profile]`` table.

    Keys: ``family`` (shape-family name), ``coefficients`` (table of all the
    family's coefficients by name) and optional ``options`` (table passed to
    :func:`profshape.shapes.get_family`; ``channel_length_m`` defaults to the
    device's).
    """
    from ..shapes import get_family

    mapping = _mapping(mapping, where)
    _check_keys(mapping, ("family", "coefficients", "options"), where)
    if "family" not in mapping or not isinstance(mapping["family"], str):
        raise ConfigError(f"[{where}] needs family = \"<shape family name>\".")
    options = dict(_mapping(mapping.get("options", {}), f"{where}.options"))
    name = mapping["family"]
    if device is not None and name in ("smooth_step", "log_well", "log_spline"):
        options.setdefault("channel_length_m", device.channel_length_m)
    try:
        family = get_family(name, **options)
    except InputDataError as exc:
        raise _reraise(exc, where) from None
    except TypeError as exc:
        raise ConfigError(f"[{where}] bad options for family {name!r}: {exc}") from None
    coeffs = _mapping(mapping.get("coefficients", {}), f"{where}.coefficients")
    _check_keys(coeffs, tuple(family.names), f"{where}.coefficients")
    missing = [k for k in family.names if k not in coeffs]
    if missing:
        raise ConfigError(
            f"[{where}.coefficients] missing {', '.join(missing)} for family {name!r}."
        )
    values = [_number(coeffs[k], f"{where}.coefficients.{k}") for k in family.names]
    if not all(math.isfinite(v) for v in values):
        raise ConfigError(f"[{where}.coefficients] values must be finite.")
    try:
        return family.profile(values)
    except InputDataError as exc:
        raise _reraise(exc, where) from None
