"""Cheap deterministic forward models for the reliability suite, with injected faults.

Everything here is importable by module name (``reliability._faulty``) so a spawned
process-pool worker and the subprocess driver can unpickle it.

The clean model: ions fall through a fraction of the discharge voltage that follows
the cumulative electron resistivity, taken as ~ 1/profile (a larger anomalous
coefficient means more cross-field mobility, so less field there). Energy
conservation gives v = sqrt(2 e U / m_i) (a closed form); CODATA constants come from
scipy.constants. It is a cheap, smooth, deterministic stand-in for a discharge code;
the suite tests the machinery around it, not its physics.

Faults are keyed on a hash of (coefficients, operating-point label), so a given
trial fails the same way in every run: an interrupted and an uninterrupted search
see the same faults, and a test can predict which trials must fail and why.
"""

from __future__ import annotations

import hashlib
import math
import os
import sys
import time
from dataclasses import dataclass

import numpy as np
from scipy import constants

from profshape import OperatingPoint
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.forward.callable import CallableModel
from profshape.problem import CalibrationProblem
from profshape.shapes import get_family

GRID_M = np.linspace(0.0, 0.06, 121)
# Xe+ mass: IUPAC standard atomic weight of xenon 131.293 (from memory) times the
# CODATA atomic mass constant, less one electron mass (scipy.constants).
XENON_ION_MASS_KG = 131.293 * constants.atomic_mass - constants.m_e
TRUTH = (-2.7, -0.8, 0.026, 0.004)
CHANNEL_LENGTH_M = 0.024

#: Fault kinds a callable can show (a process exit is covered by the external program).
CALLABLE_FAULTS = ("raise", "nan", "inf", "wrong_length", "bad_type", "sys_exit")


def clean_velocity(values: np.ndarray, voltage_V: float) -> np.ndarray:
    """Ion velocity [m/s] on GRID_M for profile values ``values`` at ``voltage_V``."""
    resistivity = 1.0 / np.asarray(values, dtype=float)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (resistivity[1:] + resistivity[:-1])
                                           * np.diff(GRID_M))])
    drop = 0.9 * voltage_V * cum / cum[-1]
    return np.sqrt(2.0 * constants.e * drop / XENON_ION_MASS_KG) + 300.0


def fault_draw(coefficients: dict, label: str) -> float:
    """A uniform number in [0, 1) fixed by the coefficients and the point label."""
    text = repr(sorted((k, repr(float(v))) for k, v in coefficients.items())) + "|" + label
    h = hashlib.sha256(text.encode()).digest()
    return int.from_bytes(h[:8], "big") / 2.0**64


def fault_for(coefficients: dict, label: str, rate: float, kinds: tuple[str, ...]) -> str | None:
    """Which fault (or None) a run shows."""
    r = fault_draw(coefficients, label)
    if r >= rate:
        return None
    return kinds[min(int(r / rate * len(kinds)), len(kinds) - 1)]


@dataclass(frozen=True)
class FaultyFunction:
    """A forward function that fails at a given rate, in the ways listed in ``kinds``.

    Parameters
    ----------
    rate : float
        Probability (per run) of a fault; 0 for the clean model.
    kinds : tuple of str
        Fault kinds drawn from :data:`CALLABLE_FAULTS`.
    sleep_s : float
        Wall time of each run [s], so kills land mid-run.
    """

    rate: float = 0.0
    kinds: tuple[str, ...] = CALLABLE_FAULTS
    sleep_s: float = 0.0

    def __call__(self, profile, point):
        if self.sleep_s:
            time.sleep(self.sleep_s)
        v = clean_velocity(profile(GRID_M), point.discharge_voltage_V)
        scalars = {"discharge_current": 1e-3 * point.discharge_voltage_V}
        fault = fault_for(profile.coefficients, point.label, self.rate, self.kinds)
        if fault is None:
            return {"z_m": GRID_M, "ion_velocity_m_s": v, "scalars": scalars}
        if fault == "raise":
            raise RuntimeError("injected fault: solver blew up")
        if fault == "nan":
            v = v.copy()
            v[len(v) // 2] = math.nan
            return {"z_m": GRID_M, "ion_velocity_m_s": v, "scalars": scalars}
        if fault == "inf":
            return {"z_m": GRID_M, "ion_velocity_m_s": v,
                    "scalars": {"discharge_current": math.inf}}
        if fault == "wrong_length":
            return {"z_m": GRID_M, "ion_velocity_m_s": v[:-7], "scalars": scalars}
        if fault == "bad_type":
            return "garbage output line\x00\x01"
        if fault == "sys_exit":
            sys.exit(3)  # an in-house wrapper that exits instead of raising
        if fault == "hard_exit":
            os._exit(7)  # a crash that takes the worker process with it
        raise AssertionError(f"unknown fault {fault!r}")


def expected_reason(fault: str) -> str:
    """A fragment the trial log's ``error`` column must hold for a fault kind."""
    return {
        "raise": "injected fault: solver blew up",
        "nan": "non-finite",
        "inf": "'discharge_current' is inf",
        "wrong_length": "z_m has 121 values but ion_velocity_m_s has 114",
        "bad_type": "returned str",
        "sys_exit": "SystemExit",
        "hard_exit": "process",
    }[fault]


def make_problem(function: FaultyFunction | None = None, labels=("300V", "250V"),
                 seed: int = 0) -> CalibrationProblem:
    """A two-point calibration problem with synthetic data from the clean model."""
    family = get_family("smooth_step", channel_length_m=CHANNEL_LENGTH_M)
    fn = function or FaultyFunction()
    model = CallableModel(fn, name="faulty", version="1", grid_m=GRID_M)
    rng = np.random.default_rng(seed)
    points = []
    for lab in labels:
        op = OperatingPoint(lab, float(lab.rstrip("V")), 4.5e-6)
        v = clean_velocity(family.profile(np.array(TRUTH))(GRID_M), op.discharge_voltage_V)
        zm = np.linspace(0.005, 0.055, 12)
        vm = np.interp(zm, GRID_M, v)
        sigma = np.full_like(zm, 300.0)
        points.append(OperatingPointData(
            op, IonVelocityProfile(zm, vm + sigma * rng.normal(size=zm.size), sigma)))
    return CalibrationProblem(family, DataSet(points), model)
