"""A cheap closed-form forward model for the workflow tests (importable by spawned workers).

Ions fall through a fraction of the discharge voltage that follows the cumulative
electron resistivity, taken as ~ 1/profile; energy conservation gives
v = sqrt(2 e U / m_i) (closed form; CODATA constants from scipy.constants). The
tests check the machinery around a forward model (workers, progress, resume), not
its physics.
"""

from __future__ import annotations

import functools
import os
from pathlib import Path

import numpy as np
from scipy import constants

from profshape import OperatingPoint
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.forward.callable import CallableModel
from profshape.problem import CalibrationProblem
from profshape.shapes import get_family

GRID_M = np.linspace(0.0, 0.06, 121)
# Xe+ mass: standard atomic weight of xenon 131.293 (IUPAC, from memory) x CODATA atomic mass constant
ION_MASS_KG = 131.293 * constants.atomic_mass - constants.m_e
TRUTH = (-2.7, -0.8, 0.026, 0.004)


def velocity(values: np.ndarray, voltage_V: float) -> np.ndarray:
    """Ion velocity [m/s] on GRID_M for profile values at ``voltage_V``."""
    resistivity = 1.0 / np.asarray(values, dtype=float)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (resistivity[1:] + resistivity[:-1]) * np.diff(GRID_M))])
    return np.sqrt(2.0 * constants.e * 0.9 * voltage_V * cum / cum[-1] / ION_MASS_KG) + 300.0


def forward(profile, point):
    """The clean forward function (module level: picklable)."""
    return GRID_M, velocity(profile(GRID_M), point.discharge_voltage_V)


def forward_losing_worker(marker: str, profile, point):
    """Like :func:`forward`, but the first call ends its own worker process (a pre-emption)."""
    path = Path(marker)
    if not path.exists():
        path.write_text(str(os.getpid()))
        os._exit(1)
    return forward(profile, point)


def make_problem(marker: str | None = None) -> CalibrationProblem:
    """Two operating points of synthetic data from TRUTH (noise-free, sigma 200 m/s)."""
    family = get_family("smooth_step", channel_length_m=0.024)
    truth = family.profile(np.array(TRUTH))
    z = np.linspace(0.004, 0.055, 10)
    points = []
    for label, volts in (("a", 300.0), ("b", 250.0)):
        op = OperatingPoint(label, volts, 5e-6)
        v = np.interp(z, GRID_M, velocity(truth(GRID_M), volts))
        points.append(OperatingPointData(op, IonVelocityProfile(z, v, np.full(z.size, 200.0))))
    func = forward if marker is None else functools.partial(forward_losing_worker, marker)
    return CalibrationProblem(family, DataSet(points), CallableModel(func, name="closed-form"))
