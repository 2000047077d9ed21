"""Shared fixtures of the search tests: a cheap analytic forward model and problem."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from scipy import constants

from profshape import OperatingPoint
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.forward.callable import CallableModel
from profshape.problem import CalibrationProblem
from profshape.shapes import get_family

torch.set_num_threads(1)

GRID_M = np.linspace(0.0, 0.06, 121)
XENON_ION_MASS_KG = 131.293 * constants.atomic_mass - constants.m_e  # IUPAC weight, CODATA


def accel_model(profile, point):
    """Ions gain a fraction of the voltage where the electron resistivity (~1/profile) is."""
    if profile.coefficients.get("transition_width_m", 0.0) > 0.0105:
        raise RuntimeError("toy model diverged (wide transition)")
    resistivity = 1.0 / profile(GRID_M)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (resistivity[1:] + resistivity[:-1])
                                           * np.diff(GRID_M))])
    drop = 0.9 * point.discharge_voltage_V * cum / cum[-1]
    v = np.sqrt(2 * constants.e * drop / XENON_ION_MASS_KG) + 300.0
    return GRID_M, v


def make_problem(truth=None, labels=("300V", "250V"), seed=0):
    family = get_family("smooth_step", channel_length_m=0.024)
    truth = np.array([-2.7, -0.8, 0.026, 0.004]) if truth is None else np.asarray(truth)
    model = CallableModel(accel_model, version="1", grid_m=GRID_M)
    rng = np.random.default_rng(seed)
    points = []
    for lab in labels:
        op = OperatingPoint(lab, float(lab.rstrip("V")), 4.5e-6)
        z, v = accel_model(family.profile(truth), op)
        zm = np.linspace(0.005, 0.055, 12)
        vm = np.interp(zm, z, v)
        sigma = np.full_like(zm, 300.0)
        points.append(OperatingPointData(op, IonVelocityProfile(zm, vm + sigma * rng.normal(
            size=zm.size), sigma)))
    return CalibrationProblem(family, DataSet(points), model)


@pytest.fixture
def problem():
    return make_problem()


@pytest.fixture
def toy():
    """The toy model's pieces, for tests that build their own problems."""
    from types import SimpleNamespace

    return SimpleNamespace(make_problem=make_problem, accel_model=accel_model, grid_m=GRID_M)
