"""Settings of a search, validated where they enter."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from numbers import Integral, Real
from typing import Any, Literal

import numpy as np

from ..exceptions import ConfigError
from ..validation import Constraint, InstanceOf, Interval, Options, validate_dataclass

__all__ = ["CONSTRAINTS", "FIXES", "SearchSettings"]

ObjectiveTransform = Literal["log", "identity"]
Strategy = Literal["composite", "global", "trust_region", "hybrid"]
STRATEGIES = ("composite", "global", "trust_region", "hybrid")


def _at_least(low: int) -> Interval:
    return Interval(Integral, low, None, closed="left")


#: Constraints of every checked field (see :mod:`profshape.validation`).
CONSTRAINTS: dict[str, list[Constraint | None]] = {
    "budget": [_at_least(1)],
    "batch_size": [_at_least(1)],
    "n_initial": [_at_least(1), None],
    "patience": [_at_least(1), None],
    "seed": [_at_least(0)],
    "num_restarts": [_at_least(1)],
    "raw_samples": [_at_least(1)],
    "mc_samples": [_at_least(1)],
    "n_workers": [_at_least(1), None],
    "max_fit_attempts": [_at_least(1)],
    "torch_threads": [_at_least(1), None],
    "trust_region_warmup": [_at_least(0), None],
    "target_reduced_chi2": [Interval(Real, 0, None, closed="neither"), None],
    "objective_transform": [Options(str, ("log", "identity"))],
    "strategy": [Options(str, STRATEGIES)],
    "progress": [InstanceOf(bool)],
    "asynchronous": [InstanceOf(bool)],
}
FIXES = {name: f"Give {name}={c[0].left:g} or more." for name, c in CONSTRAINTS.items()
          if isinstance(c[0], Interval) and c[0].kind is Integral and c[0].left is not None}
FIXES["target_reduced_chi2"] = "(the noise floor is 1)"


@dataclass(frozen=True)
class SearchSettings:
    """How a search runs and when it stops.

    Parameters
    ----------
    budget : int
        Maximum number of forward-model trials (each trial runs every operating
        point once), failures and user points included.
    batch_size : int, default=1
        Number of proposals ``q`` made together. ``q = 1`` uses analytic log
        expected improvement; ``q > 1`` (or pending points) uses batch log noisy
        expected improvement.
    n_initial : int or None, default=None
        Number of scrambled Sobol points of the initial design; ``None`` means
        ``2 d + 1`` (common practice, no source).
    initial_points : list of dict or array_like, optional
        User starting shapes (coefficient dicts keyed by parameter name, or
        arrays in parameter order, physical units). Run first, logged with
        source ``"user"``; they come in addition to the Sobol points.
    target_reduced_chi2 : float or None, default=None
        Stop as soon as the best reduced chi-square is at or below this value
        (the noise floor of a correct model is 1).
    patience : int or None, default=None
        Stop after this many completed proposal trials without improving the best
        objective.
    seed : int, default=0
        Seed of the Sobol design and of all proposal randomness. Proposal
        ``i`` draws from a stream that depends on ``(seed, i)`` only.
    progress : bool, default=True
        Show a tqdm progress bar.
    num_restarts : int, default=8
        Restarts of the acquisition optimiser (``botorch.optim.optimize_acqf``).
    raw_samples : int, default=256
        Random raw samples used to pick the restart points.
    mc_samples : int, default=128
        Quasi-Monte-Carlo samples of the batch acquisition function.
    n_workers : int or None, default=None
        Number of trials kept in flight at once; ``None`` means ``batch_size``.
        Also the size of the default local process pool.
    asynchronous : bool, default=False
        ``False``: synchronous batches (propose ``q``, wait for all, repeat);
        deterministic given the seed. ``True``: a free worker gets a new
        proposal at once, the other running trials entering as pending points;
        faster when run times vary, but the order of completion (hence the
        trials) depends on timing.
    objective_transform : {"log", "identity"}, default="log"
        Outcome fed to the GP: ``"log"`` models ``log(reduced_chi2)``;
        ``"identity"`` models the value itself (for objectives that may be
        negative, such as test functions).
    max_fit_attempts : int, default=3
        Attempts of the hyperparameter fit (``botorch.fit.fit_gpytorch_mll``).
    strategy : {"composite", "global", "trust_region", "hybrid"}, default="composite"
        How proposals are made. ``"composite"``: for a calibration problem,
        the forward model's outputs at the measured positions (and its
        scalars) are emulated (a reduced basis with a GP per component,
        :class:`profshape.emulator.OutputEmulator`) and the proposal
        maximises the Monte-Carlo expected improvement of the chi-square
        computed from emulated outputs (Astudillo and Frazier 2019; see
        :mod:`profshape.search.composite`), with a proposal in another basin
        after each run of ``max(3, d)`` proposals without improvement; for
        objectives that give only a number (a :class:`SearchSpace`, or
        :meth:`Search.tell` without outputs) it falls back to
        ``"trust_region"``. The other three model the scalar objective
        ``log(reduced_chi2)`` with one GP (``"trust_region"`` was the default
        before ``"composite"``) and differ in where the acquisition function
        is maximised. ``"global"``: over the
        whole unit cube. ``"trust_region"``: after a warm-up of global
        proposals (``trust_region_warmup``), over a box around the best trial
        that grows after successes and shrinks after failures, in the manner
        of TuRBO (Eriksson et al. 2019; see
        :mod:`profshape.search.trust_region`), with a global batch after each
        collapse. ``"hybrid"``: as ``"trust_region"``, but every third
        model-based batch is global. On the 4-coefficient smooth-step
        benchmark (``benchmarks/search_efficiency.py``, budget 120, 3 seeds)
        the trust region with warm-up ends lower than ``"global"`` on every
        seed (best reduced chi-square 4.33, 4.01, 1.97 against 10.5, 4.38,
        2.16); without the warm-up it settled in a secondary basin on a
        2-coefficient calibration with 20 trials.
    trust_region_warmup : int or None, default=None
        Model-based proposals over the whole cube (expected improvement, as
        ``"global"``) after the initial design and before the first
        trust-region proposal, under ``"trust_region"`` and ``"hybrid"``;
        ``None`` means ``2 * d``. The region then starts around a best trial
        that the global search has already looked for, rather than around the
        best point of the space-filling design.
    torch_threads : int or None, default=1
        Torch intra-op threads while the search fits and proposes (restored
        afterwards); ``None`` leaves torch's setting alone. One thread is
        fastest for the small matrices of a search (a few hundred trials) and
        leaves the other cores to the forward-model workers; several threads
        competing with busy workers for the cores slow a proposal down by an
        order of magnitude.
    """

    budget: int
    batch_size: int = 1
    n_initial: int | None = None
    initial_points: tuple[Any, ...] | list[Any] | None = None
    target_reduced_chi2: float | None = None
    patience: int | None = None
    seed: int = 0
    progress: bool = True
    num_restarts: int = 8
    raw_samples: int = 256
    mc_samples: int = 128
    n_workers: int | None = None
    asynchronous: bool = False
    objective_transform: ObjectiveTransform = "log"
    max_fit_attempts: int = 3
    torch_threads: int | None = 1
    strategy: Strategy = "composite"
    trust_region_warmup: int | None = None

    def __post_init__(self) -> None:
        validate_dataclass(self, CONSTRAINTS, fixes=FIXES, error=ConfigError)
        if self.raw_samples < self.num_restarts:
            raise ConfigError(
                f"SearchSettings.raw_samples ({self.raw_samples}) must be >= num_restarts "
                f"({self.num_restarts}); raise raw_samples or lower num_restarts."
            )
        if self.initial_points is not None:
            if isinstance(self.initial_points, (str, bytes, dict)) or not hasattr(
                self.initial_points, "__len__"
            ):
                raise ConfigError(
                    "SearchSettings.initial_points must be a list of coefficient dicts or "
                    f"arrays; got {type(self.initial_points).__name__}."
                )
            object.__setattr__(self, "initial_points", tuple(self.initial_points))

    @property
    def workers(self) -> int:
        """Number of trials in flight (``n_workers`` or ``batch_size``)."""
        return self.n_workers if self.n_workers is not None else self.batch_size

    def resolved_n_initial(self, dim: int) -> int:
        """Size of the Sobol initial design for a ``dim``-dimensional space."""
        return self.n_initial if self.n_initial is not None else 2 * dim + 1

    def resolved_trust_region_warmup(self, dim: int) -> int:
        """Global proposals before the first trust-region one (``2 * dim`` if unset)."""
        w = self.trust_region_warmup
        return w if w is not None else 2 * dim

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (initial points as lists)."""
        out = asdict(self)
        if self.initial_points is not None:
            out["initial_points"] = [
                dict(p) if isinstance(p, dict) else np.asarray(p, dtype=float).tolist()
                for p in self.initial_points
            ]
        return out
