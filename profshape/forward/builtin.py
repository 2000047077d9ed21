"""The built-in 1-D discharge solver as a forward model."""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import asdict
from typing import Any

import numpy as np

from .._version import __version__
from ..observables import FIELD_OF_PROFILE
from ..operating_point import OperatingPoint
from ..profile import AnomalousProfile
from .base import ForwardModel, Prediction

__all__ = ["SCALAR_FROM_GLOBAL", "BuiltinSolverModel"]

#: Solver global output → scalar observable name (see profshape.data.SCALAR_UNITS).
SCALAR_FROM_GLOBAL = {
    "discharge_current_A": "discharge_current",
    "thrust_N": "thrust",
    "specific_impulse_s": "specific_impulse",
    "anode_efficiency": "anode_efficiency",
    "mass_utilization": "mass_utilization",
    "current_utilization": "current_utilization",
    "voltage_utilization": "voltage_utilization",
    "exit_ion_energy_eV": "exit_ion_energy_eV",
    "beam_current_A": "ion_beam_current",
    "oscillation_amplitude_A": "discharge_current_rms_amplitude",
    "oscillation_frequency_Hz": "discharge_current_frequency",
}
_FIELD_COLUMNS = ("potential_V", "electron_temperature_eV", "plasma_density_m3",
                  "anomalous_frequency_per_s")


class BuiltinSolverModel(ForwardModel):
    """Forward model running :func:`profshape.solver.solve`.

    Parameters
    ----------
    device : profshape.solver.Device, optional
        Thruster geometry and field; default :func:`profshape.solver.demo_device`.
    settings : profshape.solver.SolverSettings, optional
        Grid and time-march options; default settings.

    Notes
    -----
    The prediction's ``scalars`` are the solver's global outputs under the
    observable names of :data:`SCALAR_FROM_GLOBAL` (``discharge_current`` [A],
    ``thrust`` [N], ...). A solver status ``"not_converged"`` or ``"failed"``
    passes through with the solver's reason. ``fields`` carries the potential,
    electron temperature, plasma density and anomalous frequency per cell;
    ``profiles`` the first three under their observable names
    (:data:`profshape.observables.FIELD_OF_PROFILE`).
    """

    name = "builtin-solver"

    #: Scalar observables this model produces (checked against the data before any run).
    scalar_names: tuple[str, ...] = tuple(SCALAR_FROM_GLOBAL.values())
    #: Profile observables this model produces (see profshape.observables.PROFILE_UNITS).
    profile_names: tuple[str, ...] = ("ion_velocity", *FIELD_OF_PROFILE)

    def __init__(self, device: Any = None, settings: Any = None) -> None:
        from ..solver import SolverSettings, demo_device

        self.device = demo_device() if device is None else device
        self.settings = SolverSettings() if settings is None else settings
        self.version = __version__

    def grid(self, point: OperatingPoint) -> np.ndarray:
        """Solver cell centres [m]."""
        from ..solver import grid

        return grid(self.device, self.settings)

    def cache_key(self) -> str:
        """Model, profshape version, device and solver settings."""
        try:
            cfg = json.dumps({"device": repr(self.device), "settings": asdict(self.settings)},
                             sort_keys=True, default=repr)
        except TypeError:
            cfg = repr((self.device, self.settings))
        digest = hashlib.sha256(cfg.encode()).hexdigest()[:16]
        return f"builtin:{self.name}:{self.version}:{digest}"

    def run(self, profile: AnomalousProfile, point: OperatingPoint) -> Prediction:
        """Solve and convert the result."""
        from ..solver import solve

        result = solve(self.device, point, profile, self.settings)
        if result.status not in ("ok", "oscillating"):  # oscillating: averages over >= 5 periods
            status = result.status if result.status in ("not_converged", "failed") else "failed"
            return Prediction.failure(status, f"solver: {result.reason}")
        scalars = {}
        for key, name in SCALAR_FROM_GLOBAL.items():
            value = result.globals.get(key)
            if isinstance(value, (int, float)) and not isinstance(value, bool):
                scalars[name] = float(value)
        fields = {
            col: result.cells[col].to_numpy(dtype=float)
            for col in _FIELD_COLUMNS
            if col in result.cells
        }
        fields = {k: v for k, v in fields.items() if np.all(np.isfinite(v))}
        profiles = {name: fields[col] for name, col in FIELD_OF_PROFILE.items() if col in fields}
        note = "" if all(math.isfinite(v) for v in scalars.values()) else "non-finite scalar"
        return Prediction(
            status="ok",
            z_m=result.z_m,
            ion_velocity_m_s=result.ion_velocity_m_s,
            scalars=scalars,
            reason=note,
            fields=fields,
            profiles=profiles,
        )
