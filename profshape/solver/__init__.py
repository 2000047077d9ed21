"""The built-in forward model: a 1-D axial quasi-neutral fluid Hall-effect-thruster solver.

See :mod:`profshape.solver.model` for the equations, boundary conditions
and numerics, :mod:`profshape.solver.rates` for the rate-coefficient
sources and :mod:`profshape.solver.collisions` for the formulary helpers.
"""

from __future__ import annotations

from .config import (
    default_profile,
    device_from_mapping,
    point_from_mapping,
    profile_from_mapping,
    settings_from_mapping,
)
from .device import Device, demo_device, demo_operating_points
from .magnetic import BellField, MagneticField, TabulatedField
from .model import grid, solve
from .results import CELL_COLUMNS, GLOBAL_DESCRIPTIONS, SolverResult
from .settings import SolverSettings

__all__ = [
    "CELL_COLUMNS",
    "GLOBAL_DESCRIPTIONS",
    "BellField",
    "Device",
    "MagneticField",
    "SolverResult",
    "SolverSettings",
    "TabulatedField",
    "default_profile",
    "demo_device",
    "demo_operating_points",
    "device_from_mapping",
    "grid",
    "point_from_mapping",
    "profile_from_mapping",
    "settings_from_mapping",
    "solve",
]
