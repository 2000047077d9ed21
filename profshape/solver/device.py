"""Thruster geometry and the invented demo device."""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..exceptions import InputDataError
from ..operating_point import OperatingPoint
from .magnetic import BellField, MagneticField, TabulatedField, _finite

__all__ = ["Device", "demo_device", "demo_operating_points"]


@dataclass(frozen=True)
class Device:
    """Annular Hall-effect-thruster channel and the axial domain of the solver.

    Parameters
    ----------
    channel_length_m : float
        Anode-to-exit channel length [m].
    inner_radius_m, outer_radius_m : float
        Channel radii [m], 0 <= inner < outer.
    domain_length_m : float
        Distance from the anode to the cathode plane [m], between 1.2 and
        5 channel lengths.
    magnetic_field : BellField or TabulatedField
        Reference radial field B(z) [T] (scaled per operating point by
        ``OperatingPoint.magnetic_field_scale``).
    anode_temperature_K : float, default=500.0
        Anode temperature [K]; sets the neutral drift speed.
    cathode_electron_temperature_eV : float, default=2.5
        Electron temperature imposed at the cathode plane [eV].
    name : str, default="device"
        Label for reports.

    Raises
    ------
    InputDataError
        Naming the field, if a value is missing, non-finite or out of range.
    """

    channel_length_m: float
    inner_radius_m: float
    outer_radius_m: float
    domain_length_m: float
    magnetic_field: MagneticField
    anode_temperature_K: float = 500.0
    cathode_electron_temperature_eV: float = 2.5
    name: str = "device"

    def __post_init__(self) -> None:
        fields = {
            "channel_length_m": dict(positive=True),
            "inner_radius_m": dict(nonneg=True),
            "outer_radius_m": dict(positive=True),
            "domain_length_m": dict(positive=True),
            "anode_temperature_K": dict(positive=True),
            "cathode_electron_temperature_eV": dict(positive=True),
        }
        for key, opts in fields.items():
            object.__setattr__(self, key, _finite(f"device.{key}", getattr(self, key), **opts))
        if self.outer_radius_m <= self.inner_radius_m:
            raise InputDataError(
                f"device.outer_radius_m = {self.outer_radius_m!r} m must exceed "
                f"inner_radius_m = {self.inner_radius_m!r} m."
            )
        if self.channel_length_m > 1.0 or self.outer_radius_m > 2.0:
            raise InputDataError(
                "device: channel_length_m / outer_radius_m look like millimetres; give metres."
            )
        ratio = self.domain_length_m / self.channel_length_m
        if not 1.2 <= ratio <= 5.0:
            raise InputDataError(
                f"device.domain_length_m = {self.domain_length_m!r} m is {ratio:.3g} channel "
                "lengths; put the cathode plane between 1.2 and 5 channel lengths."
            )
        if not 0.05 <= self.cathode_electron_temperature_eV <= 50.0:
            raise InputDataError(
                "device.cathode_electron_temperature_eV must lie in [0.05, 50] eV; got "
                f"{self.cathode_electron_temperature_eV!r}."
            )
        if not isinstance(self.magnetic_field, BellField | TabulatedField):
            raise InputDataError(
                "device.magnetic_field must be a BellField or TabulatedField; got "
                f"{type(self.magnetic_field).__name__}."
            )
        object.__setattr__(self, "name", str(self.name))

    @property
    def channel_area_m2(self) -> float:
        """Annular cross-section pi (r_o^2 - r_i^2) [m^2]."""
        return math.pi * (self.outer_radius_m**2 - self.inner_radius_m**2)

    @property
    def channel_width_m(self) -> float:
        """Radial gap r_o - r_i [m]."""
        return self.outer_radius_m - self.inner_radius_m

    def to_dict(self) -> dict[str, object]:
        """Plain-dict form (same keys as the TOML ``[device]`` table)."""
        return {
            "name": self.name,
            "channel_length_m": self.channel_length_m,
            "inner_radius_m": self.inner_radius_m,
            "outer_radius_m": self.outer_radius_m,
            "domain_length_m": self.domain_length_m,
            "anode_temperature_K": self.anode_temperature_K,
            "cathode_electron_temperature_eV": self.cathode_electron_temperature_eV,
            "magnetic_field": self.magnetic_field.to_dict(),
        }


def demo_device() -> Device:
    """The invented laboratory-scale xenon thruster "Sorrel-3".

    Channel 24 mm long, radii 32 and 44 mm (mean diameter 76 mm), cathode
    plane at 2.5 channel lengths (60 mm), bell-shaped field peaking at 17 mT
    at the channel exit. Its dimensions were made up for this project.
    """
    return Device(
        channel_length_m=0.024,
        inner_radius_m=0.032,
        outer_radius_m=0.044,
        domain_length_m=0.060,
        magnetic_field=BellField(
            peak_T=0.017, peak_z_m=0.024, width_upstream_m=0.011, width_downstream_m=0.014
        ),
        anode_temperature_K=500.0,
        cathode_electron_temperature_eV=2.5,
        name="Sorrel-3",
    )


def demo_operating_points() -> list[OperatingPoint]:
    """Demo operating points of "Sorrel-3": 300 V and 250 V at 4.5 mg/s xenon."""
    return [
        OperatingPoint("300V", 300.0, 4.5e-6, "xenon", 1.0),
        OperatingPoint("250V", 250.0, 4.5e-6, "xenon", 1.0),
    ]
