"""Settings of a search, validated where they enter."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any, Literal

import numpy as np

from ..exceptions import ConfigError

__all__ = ["SearchSettings"]

ObjectiveTransform = Literal["log", "identity"]
Strategy = Literal["composite", "global", "trust_region", "hybrid"]
STRATEGIES = ("composite", "global", "trust_region", "hybrid")


def _int_field(name: str, value: Any, minimum: int, *, allow_none: bool = False) -> None:
    if value is None and allow_none:
        return
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ConfigError(
            f"SearchSettings.{name} must be an integer >= {minimum}"
            f"{' or None' if allow_none else ''}; got {value!r}."
        )
    if value < minimum:
        raise ConfigError(
            f"SearchSettings.{name} must be >= {minimum}; got {value!r}. "
            f"Give {name}={minimum} or more."
        )


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
        _int_field("budget", self.budget, 1)
        _int_field("batch_size", self.batch_size, 1)
        _int_field("n_initial", self.n_initial, 1, allow_none=True)
        _int_field("patience", self.patience, 1, allow_none=True)
        _int_field("seed", self.seed, 0)
        _int_field("num_restarts", self.num_restarts, 1)
        _int_field("raw_samples", self.raw_samples, 1)
        _int_field("mc_samples", self.mc_samples, 1)
        _int_field("n_workers", self.n_workers, 1, allow_none=True)
        _int_field("max_fit_attempts", self.max_fit_attempts, 1)
        _int_field("torch_threads", self.torch_threads, 1, allow_none=True)
        _int_field("trust_region_warmup", self.trust_region_warmup, 0, allow_none=True)
        if self.raw_samples < self.num_restarts:
            raise ConfigError(
                f"SearchSettings.raw_samples ({self.raw_samples}) must be >= num_restarts "
                f"({self.num_restarts}); raise raw_samples or lower num_restarts."
            )
        if self.target_reduced_chi2 is not None:
            t = self.target_reduced_chi2
            if isinstance(t, bool) or not isinstance(t, (int, float, np.floating)):
                raise ConfigError(
                    f"SearchSettings.target_reduced_chi2 must be a number > 0 or None; got {t!r}."
                )
            if not math.isfinite(float(t)) or float(t) <= 0.0:
                raise ConfigError(
                    f"SearchSettings.target_reduced_chi2 must be finite and > 0; got {t!r} "
                    "(the noise floor is 1)."
                )
        if self.objective_transform not in ("log", "identity"):
            raise ConfigError(
                "SearchSettings.objective_transform must be 'log' or 'identity'; "
                f"got {self.objective_transform!r}."
            )
        if self.strategy not in STRATEGIES:
            raise ConfigError(
                f"SearchSettings.strategy must be one of {list(STRATEGIES)}; "
                f"got {self.strategy!r}."
            )
        for name in ("progress", "asynchronous"):
            if not isinstance(getattr(self, name), bool):
                raise ConfigError(
                    f"SearchSettings.{name} must be True or False; got {getattr(self, name)!r}."
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
