"""profshape: Bayesian calibration of the anomalous electron-transport profile
of Hall-effect-thruster discharge models against measured ion-velocity data.

The heavy parts (torch, botorch, numba) are imported on first use, so that
``import profshape`` stays quick. Main entry points:

- :mod:`profshape.shapes`: shape families (coefficients → anomalous profile).
- :mod:`profshape.data`: measured data sets and operating points.
- :mod:`profshape.likelihood`: Gaussian likelihood and reduced chi-square.
- :mod:`profshape.solver`: the built-in 1-D discharge solver.
- :mod:`profshape.forward`: forward-model adapters (built-in, callable, external).
- :mod:`profshape.problem`: a calibration problem (family + data + forward model).
- :mod:`profshape.search`: the Bayesian-optimisation search.
- :mod:`profshape.posterior`: posterior sampling, bands and predictions.
- :mod:`profshape.workflow`: the job from a calibration file (``calibrate``, ``resume``,
  the output folder and its report).
"""

from __future__ import annotations

from ._version import __version__
from .exceptions import (
    ConfigError,
    ConvergenceWarning,
    ForwardModelError,
    InputDataError,
    ProfshapeError,
)
from .operating_point import OperatingPoint
from .profile import AnomalousProfile

__all__ = [
    "AnomalousProfile",
    "ConfigError",
    "ConvergenceWarning",
    "ForwardModelError",
    "InputDataError",
    "OperatingPoint",
    "ProfshapeError",
    "__version__",
]
