"""What the posterior needs from a calibration problem, as a :class:`typing.Protocol`.

:class:`profshape.problem.CalibrationProblem` satisfies it; so may any object
with these members (a test double, a problem of another package). The
posterior reads the search space (names, bounds, unit-cube map), the data
and likelihood (for the emulated misfit and the checks), and runs real
forward evaluations of coefficient vectors.
"""

from __future__ import annotations

from concurrent.futures import Executor
from typing import TYPE_CHECKING, Any, Protocol, runtime_checkable

import numpy as np

if TYPE_CHECKING:
    from ..data import DataSet
    from ..forward.base import ForwardModel
    from ..likelihood import LikelihoodSettings
    from ..operating_point import OperatingPoint
    from ..problem import TrialOutcome
    from ..profile import AnomalousProfile
    from ..shapes import ShapeFamily

__all__ = ["PosteriorProblem"]


@runtime_checkable
class PosteriorProblem(Protocol):
    """A calibration problem as the posterior uses it (see the module docstring)."""

    family: ShapeFamily
    dataset: DataSet
    forward_model: ForwardModel
    likelihood: LikelihoodSettings
    fit_discrepancy: bool

    @property
    def names(self) -> tuple[str, ...]:
        """The searched parameters' names."""

    @property
    def bounds(self) -> np.ndarray:
        """Bounds of shape (dim, 2)."""

    @property
    def dim(self) -> int:
        """The number of searched parameters."""

    @property
    def n_fitted(self) -> int:
        """Fitted parameters p of the degrees of freedom n - p."""

    def to_unit(self, coefficients: Any) -> np.ndarray:
        """Coefficients (physical units) to the unit cube."""

    def from_unit(self, unit: Any) -> np.ndarray:
        """The unit cube to coefficients (physical units)."""

    def profile_for(self, coefficients: Any, label: str) -> AnomalousProfile:
        """The profile run at the data set's point ``label``."""

    def profile_at(self, coefficients: Any, point: OperatingPoint) -> AnomalousProfile:
        """The profile at any operating point."""

    def discrepancy_sigma_m_s(self, coefficients: Any) -> float:
        """The ion-velocity discrepancy sigma [m/s] for these coefficients."""

    def evaluate(self, coefficients: Any, executor: Executor | None = None) -> TrialOutcome:
        """One real trial: every operating point, then the misfit."""

    def evaluate_many(self, coefficients: Any, executor: Executor | None = None
                      ) -> list[TrialOutcome]:
        """:meth:`evaluate` of each row, every forward run submitted at once."""
