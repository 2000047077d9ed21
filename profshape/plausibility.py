"""Physical ranges of input values: a value outside is most likely a unit slip.

A thrust of 91.3 N for a thruster that makes 91.3 mN, or a voltage of 1e30 V,
passes every type and sign check. :func:`check_plausible` compares each
operating point and measurement with the range stated here and returns one
message per value outside it; the calibration warns
(:class:`~profshape.exceptions.ImplausibleValueWarning`) and goes on, since a
range is a judgement, not a law.

The ranges are deliberately wide: they span Hall-effect thrusters from
sub-100 W laboratory devices to the 100 kW class (common practice, no source;
orders of magnitude from memory).
"""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["POINT_RANGES", "SCALAR_RANGES", "VELOCITY_RANGES", "check_plausible"]

#: Operating-point fields: (low, high) [SI units as in the name].
POINT_RANGES: dict[str, tuple[float, float]] = {
    "discharge_voltage_V": (10.0, 5000.0),
    "anode_mass_flow_kg_s": (1e-8, 1e-3),
    "magnetic_field_scale": (0.05, 20.0),
}
#: Ion-velocity data [m/s, m]: velocity magnitude, its uncertainty, position uncertainty.
VELOCITY_RANGES: dict[str, tuple[float, float]] = {
    "ion_velocity_m_s": (0.0, 1e5),
    "sigma_ion_velocity_m_s": (0.0, 1e4),
    "sigma_z_m": (0.0, 0.01),
}
#: Scalar observables by name: (low, high) of the value [SI unit of profshape.data.SCALAR_UNITS].
SCALAR_RANGES: dict[str, tuple[float, float]] = {
    "discharge_current": (1e-3, 1e3),
    "thrust": (1e-6, 10.0),
    "specific_impulse": (100.0, 1e4),
    "anode_efficiency": (0.0, 1.0),
    "mass_utilization": (0.0, 1.5),
    "current_utilization": (0.0, 1.0),
    "voltage_utilization": (0.0, 1.0),
    "exit_ion_energy_eV": (1.0, 5000.0),
    "ion_beam_current": (1e-3, 1e3),
    "discharge_current_rms_amplitude": (0.0, 1e3),
    "discharge_current_frequency": (0.0, 1e8),
}
#: An uncertainty this many times its value says the value is in another unit.
MAX_RELATIVE_SIGMA = 10.0


def _outside(value: float, low: float, high: float) -> bool:
    return not (low <= value <= high)


def check_plausible(dataset: Any) -> list[str]:
    """Messages for the values of a data set outside their stated ranges.

    Parameters
    ----------
    dataset : profshape.data.DataSet

    Returns
    -------
    list of str
        One message per implausible value (empty when all are plausible).
    """
    out: list[str] = []
    for p in dataset:
        lab = p.point.label
        for name, (lo, hi) in POINT_RANGES.items():
            v = float(getattr(p.point, name))
            if _outside(v, lo, hi):
                out.append(f"point {lab!r}: {name} = {v:.6g} is outside the plausible range "
                           f"[{lo:g}, {hi:g}]; check its unit.")
        iv = p.ion_velocity
        if iv is not None:
            for name, arr in (("ion_velocity_m_s", np.abs(iv.velocity_m_s)),
                              ("sigma_ion_velocity_m_s", iv.sigma_m_s),
                              ("sigma_z_m", iv.sigma_z_m)):
                if arr is None or not np.size(arr):
                    continue
                lo, hi = VELOCITY_RANGES[name]
                worst = float(np.max(arr))
                if _outside(worst, lo, hi):
                    out.append(f"point {lab!r}: {name} up to {worst:.6g} is outside the plausible "
                               f"range [{lo:g}, {hi:g}]; check its unit.")
        for name, s in p.scalars.items():
            rng = SCALAR_RANGES.get(name)
            if rng is not None and _outside(abs(float(s.value)), *rng):
                out.append(f"point {lab!r}: scalar {name} = {float(s.value):.6g} is outside the "
                           f"plausible range [{rng[0]:g}, {rng[1]:g}] (SI units); check its unit.")
            if float(s.sigma) > MAX_RELATIVE_SIGMA * abs(float(s.value)) and float(s.value) != 0:
                out.append(f"point {lab!r}: scalar {name} has sigma {float(s.sigma):.6g}, over "
                           f"{MAX_RELATIVE_SIGMA:g} times its value {float(s.value):.6g}.")
    return out
