"""An operating point of the thruster: what is set on the test stand."""

from __future__ import annotations

import math
from dataclasses import dataclass

from . import constants
from .exceptions import InputDataError
from .propellants import Propellant, get_propellant

__all__ = ["OperatingPoint"]


def _positive(name: str, value: float, unit: str, label: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputDataError(
            f"operating point {label!r}: {name} must be a number [{unit}]; got {value!r}."
        ) from None
    if not math.isfinite(v) or v <= 0.0:
        raise InputDataError(
            f"operating point {label!r}: {name} must be finite and > 0 [{unit}]; got {value!r}."
        )
    return v


def _nonnegative_pressure(value: float, label: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputDataError(
            f"operating point {label!r}: background_pressure_Pa must be a number [Pa]; "
            f"got {value!r}."
        ) from None
    if not math.isfinite(v) or v < 0.0:
        raise InputDataError(
            f"operating point {label!r}: background_pressure_Pa must be finite and >= 0 [Pa] "
            f"(0 = space); got {value!r}. Give the facility pressure in pascal "
            "(1 Torr = 133.322 Pa)."
        )
    if v > 1.0:
        raise InputDataError(
            f"operating point {label!r}: background_pressure_Pa = {v!r} Pa is far above any "
            "thruster test facility (the free-molecular ingestion model needs < 1 Pa); give "
            "the pressure in pascal, not in mTorr or mbar."
        )
    return v


@dataclass(frozen=True)
class OperatingPoint:
    """Settings of one operating point.

    Parameters
    ----------
    label : str
        Short unique name, e.g. ``"300V"``.
    discharge_voltage_V : float
        Anode-to-cathode discharge voltage [V].
    anode_mass_flow_kg_s : float
        Propellant mass flow through the anode [kg/s].
    propellant : str, default="xenon"
        Propellant name or symbol (see :mod:`profshape.propellants`).
    magnetic_field_scale : float, default=1.0
        Multiplier on the device's reference radial magnetic field [-].
    background_pressure_Pa : float, default=0.0
        Facility background (neutral) pressure [Pa] at the thruster exit;
        0 means space. The built-in solver ingests the background gas through
        the cathode plane as a free-molecular flux (see
        :mod:`profshape.solver.model`). 1e-3 Pa is 7.5e-6 Torr.
    background_temperature_K : float, default=300.0
        Temperature of the background gas [K] (> 0); used only when
        ``background_pressure_Pa`` > 0.

    Raises
    ------
    InputDataError
        If a value is non-finite, not positive (negative for the background
        pressure), or the propellant unknown; the message names the field,
        the value and the fix.
    """

    label: str
    discharge_voltage_V: float
    anode_mass_flow_kg_s: float
    propellant: str = "xenon"
    magnetic_field_scale: float = 1.0
    background_pressure_Pa: float = 0.0
    background_temperature_K: float = 300.0

    def __post_init__(self) -> None:
        label = str(self.label).strip()
        if not label:
            raise InputDataError("operating point: label must be a non-empty string.")
        object.__setattr__(self, "label", label)
        object.__setattr__(
            self,
            "discharge_voltage_V",
            _positive("discharge_voltage_V", self.discharge_voltage_V, "V", label),
        )
        mdot = _positive("anode_mass_flow_kg_s", self.anode_mass_flow_kg_s, "kg/s", label)
        if mdot > 1e-3:
            raise InputDataError(
                f"operating point {label!r}: anode_mass_flow_kg_s = {mdot!r} kg/s is "
                "implausibly large; give the flow in kg/s (5 mg/s is 5e-6 kg/s)."
            )
        object.__setattr__(self, "anode_mass_flow_kg_s", mdot)
        object.__setattr__(
            self,
            "magnetic_field_scale",
            _positive("magnetic_field_scale", self.magnetic_field_scale, "-", label),
        )
        object.__setattr__(
            self,
            "background_pressure_Pa",
            _nonnegative_pressure(self.background_pressure_Pa, label),
        )
        object.__setattr__(
            self,
            "background_temperature_K",
            _positive("background_temperature_K", self.background_temperature_K, "K", label),
        )
        prop = get_propellant(self.propellant, field=f"operating point {label!r}: propellant")
        object.__setattr__(self, "propellant", prop.name)

    @property
    def propellant_data(self) -> Propellant:
        """The :class:`~profshape.propellants.Propellant` of this point."""
        return get_propellant(self.propellant)

    def to_dict(self) -> dict[str, float | str]:
        """Plain-dict form (JSON-ready)."""
        return {
            "label": self.label,
            "discharge_voltage_V": self.discharge_voltage_V,
            "anode_mass_flow_kg_s": self.anode_mass_flow_kg_s,
            "propellant": self.propellant,
            "magnetic_field_scale": self.magnetic_field_scale,
            "background_pressure_Pa": self.background_pressure_Pa,
            "background_temperature_K": self.background_temperature_K,
        }

    @property
    def background_density_m3(self) -> float:
        """Background neutral density p / (k T) [m^-3] (ideal gas; 0 in space)."""
        return float(self.background_pressure_Pa / (constants.k_B * self.background_temperature_K))
