"""profshape.constants: one module of physical constants, from scipy.constants."""

from __future__ import annotations

import math

import scipy.constants

from profshape import constants
from profshape.solver import _kernels


def test_values_are_scipy_codata():
    # source: scipy.constants (CODATA); e and k_B are exact in SI since 2019 (CODATA 2018)
    assert constants.e == 1.602176634e-19 == scipy.constants.e
    assert constants.k_B == 1.380649e-23 == scipy.constants.k
    assert constants.m_e == scipy.constants.m_e
    # CODATA 2018 value; CODATA 2022 (scipy >= 1.15) differs by 1.4e-9 relative
    assert math.isclose(constants.m_e, 9.1093837015e-31, rel_tol=1e-8)
    assert constants.amu == scipy.constants.atomic_mass
    assert math.isclose(constants.amu, 1.66053906660e-27, rel_tol=1e-8)  # CODATA 2018
    assert constants.epsilon_0 == scipy.constants.epsilon_0
    # standard gravity, 9.80665 m/s^2 by definition (3rd CGPM, 1901; scipy.constants.g)
    assert constants.g0 == 9.80665 == scipy.constants.g


def test_plain_floats_for_numba_kernels():
    for name in constants.__all__:
        assert type(getattr(constants, name)) is float, name
    assert _kernels._E is constants.e and _kernels._ME is constants.m_e
