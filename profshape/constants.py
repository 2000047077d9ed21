"""Physical constants used across profshape, in SI units, in one place.

All values come from :mod:`scipy.constants` (CODATA 2018 or 2022, as the installed
scipy ships them); they are plain module-level floats, so numba-compiled kernels may
read them as compile-time globals. Import the module (``from profshape import
constants``) or single names (``from profshape.constants import e``).
"""

from __future__ import annotations

from scipy import constants as _codata

__all__ = ["amu", "e", "epsilon_0", "g0", "k_B", "m_e", "pi"]

#: Elementary charge [C] (scipy.constants.e; exact in SI since 2019).
e: float = float(_codata.e)
#: Electron mass [kg] (scipy.constants.m_e).
m_e: float = float(_codata.m_e)
#: Boltzmann constant [J/K] (scipy.constants.k; exact in SI since 2019).
k_B: float = float(_codata.k)
#: Atomic mass constant, 1/12 of the mass of carbon-12 [kg] (scipy.constants.atomic_mass).
amu: float = float(_codata.atomic_mass)
#: Vacuum electric permittivity [F/m] (scipy.constants.epsilon_0).
epsilon_0: float = float(_codata.epsilon_0)
#: Standard acceleration of gravity [m/s^2], 9.80665 by definition (scipy.constants.g);
#: the conversion of thrust per mass flow into a specific impulse in seconds.
g0: float = float(_codata.g)
#: The ratio of a circle's circumference to its diameter (scipy.constants.pi).
pi: float = float(_codata.pi)
