"""An operating point of the thruster: what is set on the test stand."""

from __future__ import annotations

import math
from dataclasses import dataclass

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

    Raises
    ------
    InputDataError
        If a value is non-finite, not positive, or the propellant unknown.
    """

    label: str
    discharge_voltage_V: float
    anode_mass_flow_kg_s: float
    propellant: str = "xenon"
    magnetic_field_scale: float = 1.0

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
        }
