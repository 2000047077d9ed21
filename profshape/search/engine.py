"""The stepwise search: propose trials, observe their outcome.

:class:`Search` is the loop without the forward runs: it hands out unit-cube
points (:meth:`Search.ask`) and learns from their results (:meth:`Search.tell`).
:func:`~profshape.search.run_search` drives it with a forward model, an
executor and the trial log.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import torch
from botorch.acquisition import AcquisitionFunction
from botorch.models import SingleTaskGP
from botorch.models.model import Model

from .._threads import torch_threads as _torch_threads
from ..emulator import OutputEmulator
from ..exceptions import ConfigError, InputDataError
from ..output_layout import OutputLayout
from .acquisition import make_acquisition, optimize_acquisition
from .bounds import BoundHit, bound_hits
from .composite import (
    COMPOSITE,
    EXPLORE,
    FULL_REFIT_BELOW,
    REFIT_GROWTH,
    composite_acquisition,
    composite_misfit,
    fit_emulator,
    propose_composite,
    stall_length,
)
from .design import derived_seed, sobol_point, user_points_to_unit
from .settings import SearchSettings
from .stopping import STOP_BUDGET, STOP_PATIENCE, STOP_TARGET, StopRules, count_later
from .surrogate import (
    combined_model,
    fit_feasibility_model,
    fit_objective_model,
    hyperparameters,
)
from .trust_region import (
    GLOBAL,
    TRUST_REGION,
    TrustRegionState,
    trust_region_bounds,
    trust_region_state,
)

__all__ = ["LOG_FLOOR", "MIN_OK_FOR_MODEL", "Observation", "Proposal", "Search"]

#: Successful trials needed before the GP proposes; until then, more Sobol points.
MIN_OK_FOR_MODEL = 2
#: Smallest objective the log transform tells apart (a perfect fit, 0, counts as it).
LOG_FLOOR = 1e-6

SOURCES = ("initial", "proposal", "user", "resumed")


@dataclass
class Proposal:
    """A trial handed out by :meth:`Search.ask`.

    Attributes
    ----------
    trial : int
        Trial index (0-based, unique in a search).
    batch : int
        Index of the :meth:`Search.ask` call that made it.
    source : {"initial", "proposal", "user", "resumed"}
        Where the point came from.
    u : ndarray of shape (d,)
        Unit-cube coordinates.
    coefficients : dict of str to float
        Physical coefficients by parameter name.
    """

    trial: int
    batch: int
    source: str
    u: np.ndarray
    coefficients: dict[str, float] = field(default_factory=dict)


@dataclass
class Observation:
    """A finished trial as the search sees it.

    ``outputs`` is the trial's output vector
    (:meth:`profshape.output_layout.OutputLayout.vector`) when known: what the
    composite strategy's emulator learns from.
    """

    trial: int
    batch: int
    source: str
    u: np.ndarray
    value: float
    ok: bool
    outputs: np.ndarray | None = None


class Search:
    """Bayesian-optimisation search over the unit cube of a problem.

    Parameters
    ----------
    space : CalibrationProblem or SearchSpace
        Anything with ``names``, ``dim``, ``to_unit`` and ``from_unit``.
    settings : SearchSettings
        Budget, batch size, initial design, seed, optimiser effort.

    Under the default strategy ``"composite"`` and a calibration problem
    (anything with a ``dataset``), the search models the forward model's
    outputs (:mod:`profshape.search.composite`) and needs them: tell each
    trial's output vector (:meth:`outputs_of` of its predictions) with
    :meth:`tell` (``run_search`` does). For a space without data, or while
    some successful trial lacks its outputs, it proposes as
    ``"trust_region"`` does (a GP of the scalar objective).

    Attributes
    ----------
    layout : OutputLayout or None
        Order of the outputs the composite strategy emulates (``None``:
        scalar strategies only).
    emulator_ : OutputEmulator or None
        Emulator of the last composite proposal.
    model_ : botorch Model or None
        Model used for the last proposal: the objective GP, or a ModelListGP
        (objective, failure indicator) once a run has failed; the emulator's
        botorch model for a composite proposal.
    objective_model_ : SingleTaskGP or None
        GP of the outcome ``-log(reduced_chi2)`` (or ``-value`` with
        ``objective_transform="identity"``) on the unit cube.
    feasibility_model_ : SingleTaskGP or None
        GP of the failure indicator (1 failed, 0 ok).
    acquisition_ : AcquisitionFunction or None
        Acquisition function of the last proposal; call it on tensors of shape
        ``(b, 1, d)`` to map the acquisition surface.
    trust_region_bounds_ : ndarray of shape (2, d) or None
        Box the last proposal was optimised over (``None``: the whole cube).

    Examples
    --------
    >>> from profshape.search import Search, SearchSettings, SearchSpace
    >>> space = SearchSpace(["x"], [[-1.0, 2.0]])
    >>> s = Search(space, SearchSettings(budget=8, n_initial=3, objective_transform="identity",
    ...                                  num_restarts=2, raw_samples=16, progress=False))
    >>> while not s.stop_reason():
    ...     for p in s.ask():
    ...         _ = s.tell(p.trial, (p.coefficients["x"] - 0.5) ** 2)
    >>> abs(s.best_coefficients()["x"] - 0.5) < 0.1
    True
    """

    def __init__(self, space: Any, settings: SearchSettings):
        if not isinstance(settings, SearchSettings):
            raise ConfigError(
                f"settings must be a SearchSettings; got {type(settings).__name__}."
            )
        self.space = space
        self.settings = settings
        self.names = tuple(space.names)
        self.dim = len(self.names)
        self.n_initial = settings.resolved_n_initial(self.dim)
        self._user_u = (
            user_points_to_unit(settings.initial_points, self.names, space.to_unit)
            if settings.initial_points
            else np.zeros((0, self.dim))
        )
        self.stop_rules = StopRules(
            budget=settings.budget,
            target=settings.target_reduced_chi2,
            patience=settings.patience,
        )
        self._next_trial = 0
        self._next_batch = 0
        self._n_sobol = 0
        self._n_user = 0
        self._pending: dict[int, Proposal] = {}
        self._observations: dict[int, Observation] = {}
        self.model_: Model | None = None
        self.objective_model_: SingleTaskGP | None = None
        self.feasibility_model_: SingleTaskGP | None = None
        self.acquisition_: AcquisitionFunction | None = None
        self.trust_region_bounds_: np.ndarray | None = None
        self.emulator_: OutputEmulator | None = None
        self._warm: dict[str, dict[str, list[float]]] = {}
        self._kinds: dict[int, str] = {}
        self.layout: OutputLayout | None = None
        if settings.strategy == COMPOSITE and hasattr(space, "dataset"):
            self.layout = OutputLayout.from_problem(space)

    # ------------------------------------------------------------------ state
    @property
    def n_issued(self) -> int:
        """Trials proposed so far (finished or running)."""
        return self._next_trial

    @property
    def n_finished(self) -> int:
        """Trials observed."""
        return len(self._observations)

    @property
    def n_failed(self) -> int:
        """Finished trials whose forward run failed."""
        return sum(1 for o in self._observations.values() if not o.ok)

    @property
    def pending(self) -> list[Proposal]:
        """Proposals handed out and not yet observed, by trial index."""
        return [self._pending[k] for k in sorted(self._pending)]

    @property
    def observations(self) -> list[Observation]:
        """Finished trials, by trial index."""
        return [self._observations[k] for k in sorted(self._observations)]

    def remaining_budget(self) -> int:
        """Trials that may still be proposed."""
        return max(self.settings.budget - self._next_trial, 0)

    def best(self) -> Observation | None:
        """The finished successful trial with the lowest objective (first on ties)."""
        ok = [o for o in self.observations if o.ok]
        if not ok:
            return None
        return min(ok, key=lambda o: (o.value, o.trial))

    def _require_best(self) -> Observation:
        b = self.best()
        if b is None:
            raise RuntimeError("Search: no successful trial yet.")
        return b

    def _require_layout(self) -> OutputLayout:
        if self.layout is None:
            raise RuntimeError("Search: the composite strategy needs the problem's output "
                               "layout (a problem with a data set).")
        return self.layout

    def best_coefficients(self) -> dict[str, float] | None:
        """Physical coefficients of :meth:`best`."""
        b = self.best()
        return None if b is None else self._coefficients(b.u)

    def stop_reason(self) -> str | None:
        """Why the search should stop now (``"budget"``, ``"target"``, ``"patience"``).

        The target and patience rules wait while a coefficient of the best
        trial is within 1 % of a bound (:meth:`on_bounds`): the best fit may
        lie beyond it, and only the budget ends such a search.
        """
        b = self.best()
        later = count_later(
            ((o.trial, o.source) for o in self._observations.values()),
            None if b is None else b.trial,
        )
        reason = self.stop_rules.reason(
            self._next_trial, math.inf if b is None else b.value, later
        )
        if reason in (STOP_TARGET, STOP_PATIENCE) and self.on_bounds():
            # no early stop while the best fit sits on a bound: only the budget ends it
            return STOP_BUDGET if self.remaining_budget() == 0 else None
        return reason

    def on_bounds(self) -> list[BoundHit]:
        """Coefficients of the best trial within 1 % of a bound (see
        :mod:`profshape.search.bounds`); empty when none, or no trial succeeded."""
        b = self.best()
        bounds = getattr(self.space, "bounds", None)
        if b is None or bounds is None:
            return []
        return bound_hits(b.u, self.names, np.asarray(bounds, dtype=float))

    def kind_of(self, trial: int, default: str = "") -> str:
        """How trial ``trial`` was proposed (see :attr:`proposal_kinds`), else ``default``."""
        return self._kinds.get(int(trial), default)

    @property
    def proposal_kinds(self) -> dict[int, str]:
        """Kind of each model-based proposal by trial index: ``"global"`` expected
        improvement over the whole cube or ``"trust_region"`` (see
        :mod:`profshape.search.trust_region`), ``"composite"`` or ``"explore"``
        (see :mod:`profshape.search.composite`)."""
        return dict(self._kinds)

    def outputs_of(self, predictions: Any) -> np.ndarray | None:
        """The output vector of a trial's predictions for :meth:`tell`, or ``None``
        (no composite layout, or predictions without a usable misfit)."""
        if self.layout is None or predictions is None:
            return None
        try:
            return self.layout.vector(predictions)
        except InputDataError:
            return None

    def _composite_ready(self) -> bool:
        if self.layout is None:
            return False
        ok = [o for o in self._observations.values() if o.ok]
        return len(ok) >= MIN_OK_FOR_MODEL and all(o.outputs is not None for o in ok)

    def _coefficients(self, u: np.ndarray) -> dict[str, float]:
        x = np.asarray(self.space.from_unit(np.asarray(u, dtype=float)), dtype=float).reshape(-1)
        return {n: float(v) for n, v in zip(self.names, x)}

    def _outcome(self, value: float) -> float:
        if self.settings.objective_transform == "log":
            # a perfect fit (0) is a valid value: misfits below a millionth of the
            # noise floor are all alike to the surrogate (common practice, no source)
            return -math.log(max(value, LOG_FLOOR))
        return -value

    # -------------------------------------------------------------- ask/tell
    def ask(self, n: int = 1, pending: np.ndarray | Sequence[Sequence[float]] | None = None
            ) -> list[Proposal]:
        """Propose up to ``n`` new trials (fewer when the budget runs out).

        Parameters
        ----------
        n : int, default=1
            Number of proposals.
        pending : array_like of shape (m, d), optional
            Extra unit-cube points being evaluated elsewhere. Proposals already
            handed out and not yet told are always treated as pending.

        Returns
        -------
        list of Proposal
        """
        if n < 1:
            raise InputDataError(f"ask: n must be >= 1; got {n!r}.")
        n = min(n, self.remaining_budget())
        if n == 0:
            return []
        batch = self._next_batch
        self._next_batch += 1
        out: list[Proposal] = []
        while len(out) < n and self._n_user < len(self._user_u):
            out.append(self._issue(batch, "user", self._user_u[self._n_user]))
            self._n_user += 1
        while len(out) < n and self._n_sobol < self.n_initial:
            out.append(self._issue(batch, "initial", self._sobol_next()))
        m = n - len(out)
        if m:
            n_ok = sum(1 for o in self._observations.values() if o.ok)
            if n_ok < MIN_OK_FOR_MODEL:
                for _ in range(m):
                    out.append(self._issue(batch, "initial", self._sobol_next()))
            else:
                extra = [p.u for p in self.pending] + [p.u for p in out]
                if pending is not None and len(pending):
                    extra += list(np.asarray(pending, dtype=float).reshape(-1, self.dim))
                cand, kind = self._propose(m, np.array(extra).reshape(-1, self.dim))
                for u in cand:
                    p = self._issue(batch, "proposal", u)
                    self._kinds[p.trial] = kind
                    out.append(p)
        return out

    def _sobol_next(self) -> np.ndarray:
        u = sobol_point(self._n_sobol, self.dim, self.settings.seed)
        self._n_sobol += 1
        return u

    def _issue(self, batch: int, source: str, u: np.ndarray) -> Proposal:
        u = np.clip(np.asarray(u, dtype=float).reshape(self.dim), 0.0, 1.0)
        p = Proposal(self._next_trial, batch, source, u, self._coefficients(u))
        self._pending[p.trial] = p
        self._next_trial += 1
        return p

    def fit(self) -> None:
        """Fit the models of the next proposal to the data: the output emulator
        (composite strategy) or the objective GP, and the feasibility GP after a failure.

        Called by :meth:`ask`; call it yourself to inspect ``model_`` at any time.
        Each fit starts from the hyperparameters of the previous one when they
        fit the new data better than the default start (see
        :mod:`profshape.search.surrogate`).
        """
        with _torch_threads(self.settings.torch_threads):
            if self._composite_ready():
                self._fit_composite()
            else:
                self._fit()

    def _fit_feasibility(self) -> None:
        obs = self.observations
        n_failed = sum(1 for o in obs if not o.ok)
        if not n_failed:
            self.feasibility_model_ = None
            return
        # hyperparameters re-optimised only when a new failure has arrived
        meta = self._warm.get("feasibility_meta", {})
        refit = "feasibility" not in self._warm or meta.get("n_failed", [-1])[0] != n_failed
        feasibility = fit_feasibility_model(
            np.array([o.u for o in obs]), np.array([not o.ok for o in obs]),
            max_attempts=self.settings.max_fit_attempts,
            warm_start=self._warm.get("feasibility"), optimize=refit,
        )
        self.feasibility_model_ = feasibility
        self._warm["feasibility"] = hyperparameters(feasibility)
        self._warm["feasibility_meta"] = {"n_failed": [float(n_failed)]}

    def _fit(self) -> None:
        obs = self.observations
        ok = [o for o in obs if o.ok]
        if len(ok) < 1:
            raise InputDataError("fit: no successful trial to fit the GP to yet.")
        u_ok = np.array([o.u for o in ok])
        y_ok = np.array([self._outcome(o.value) for o in ok])
        attempts = self.settings.max_fit_attempts
        with torch.random.fork_rng():
            torch.manual_seed(derived_seed(self.settings.seed, "fit", self._next_trial) % 2**63)
            objective = fit_objective_model(
                u_ok, y_ok, max_attempts=attempts, warm_start=self._warm.get("objective")
            )
            self.objective_model_ = objective
            self._warm["objective"] = hyperparameters(objective)
            self._fit_feasibility()
        self.model_ = combined_model(objective, self.feasibility_model_)
        self._train = (u_ok, y_ok)

    def _fit_composite(self) -> None:
        ok = [o for o in self.observations if o.ok]
        u_ok = np.array([o.u for o in ok])
        Y_ok = np.array([o.outputs for o in ok])
        n = len(ok)
        last = self._warm.get("emulator_meta", {}).get("n_fit", [0.0])[0]
        refit = n < FULL_REFIT_BELOW or n >= REFIT_GROWTH * last or "emulator" not in self._warm
        seed = derived_seed(self.settings.seed, "fit", self._next_trial)
        with torch.random.fork_rng():
            torch.manual_seed(seed % 2**63)
            em = fit_emulator(u_ok, Y_ok, self._require_layout(), seed=seed % 2**31,
                              warm=self._warm.get("emulator"), refit=refit,
                              max_attempts=self.settings.max_fit_attempts)
            self._fit_feasibility()
        if em.score_model_ is not None:
            self._warm["emulator"] = em.hyperparameters()
            if em.optimized_:
                self._warm["emulator_meta"] = {"n_fit": [float(n)]}
        self.emulator_ = em
        self.model_ = em.model()
        self._train_composite = (u_ok, np.asarray(composite_misfit(self._require_layout(), Y_ok,
                                                                   u_ok)))

    def trust_region(self) -> TrustRegionState:
        """Trust-region state now, replayed from the finished trials (see
        :func:`~profshape.search.trust_region.trust_region_state`)."""
        return trust_region_state(
            ((o.trial, o.batch, o.value, o.ok) for o in self._observations.values()),
            self._kinds, self.dim, self.settings.batch_size,
        )

    def _next_kind(self) -> str:
        """Kind of the next model-based batch under the configured strategy."""
        strategy: str = self.settings.strategy
        if strategy == COMPOSITE:
            if self._composite_ready():
                return self._composite_kind()
            strategy = TRUST_REGION  # a scalar objective: the scalar strategy
        if strategy == GLOBAL:
            return GLOBAL
        if (TRUST_REGION not in self._kinds.values()
                and len(self._kinds) < self.settings.resolved_trust_region_warmup(self.dim)):
            return GLOBAL  # warm-up: global proposals before the region starts
        if self.trust_region().restart:
            return GLOBAL
        if strategy == "hybrid":
            n_batches = len({self._pending[t].batch if t in self._pending
                             else self._observations[t].batch for t in self._kinds})
            if n_batches % 3 == 2:
                return GLOBAL
        return TRUST_REGION

    def _composite_kind(self) -> str:
        """``"explore"`` after ``stall_length(d)`` composite proposals since the best
        trial (or the last exploration), else ``"composite"``."""
        b = self._require_best()
        ref = max([b.trial] + [t for t, k in self._kinds.items() if k == EXPLORE])
        since = sum(1 for t, k in self._kinds.items() if t > ref and k == COMPOSITE)
        return EXPLORE if since >= stall_length(self.dim) else COMPOSITE

    def _bounds(self, kind: str) -> np.ndarray | None:
        if kind != TRUST_REGION:
            self.trust_region_bounds_ = None
            return None
        if self.objective_model_ is None:
            raise RuntimeError("Search: the objective GP is not fitted yet (call fit() first).")
        kernel = self.objective_model_.covar_module
        kernel = getattr(kernel, "base_kernel", kernel)
        ls = kernel.lengthscale.detach().cpu().numpy().reshape(-1)
        self.trust_region_bounds_ = trust_region_bounds(
            self._require_best().u, ls, self.trust_region().length
        )
        return self.trust_region_bounds_

    def _propose(self, q: int, pending_u: np.ndarray) -> tuple[np.ndarray, str]:
        if self._composite_ready():
            return self._propose_composite(q, pending_u)
        with _torch_threads(self.settings.torch_threads):
            self._fit()
            u_ok, y_ok = self._train
            kind = self._next_kind()
            bounds = self._bounds(kind)
            seed = derived_seed(self.settings.seed, "proposal", self._next_trial)
            with torch.random.fork_rng():
                torch.manual_seed(seed)
                if bounds is not None:
                    u_ok, y_ok = self._fit_local(bounds)
                return self._optimize(q, pending_u, u_ok, y_ok, seed, bounds), kind

    def _fit_local(self, bounds: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Refit the objective GP on the trials near a trust region (TuRBO's local model).

        The trials inside the box doubled about its centre, and at least the
        ``resolved_n_initial(d)`` nearest ones (lengthscale-scaled distance to the
        best trial): a model standardised on these resolves the variation near
        the best trial, which a global model standardised on the whole range of
        the objective treats as noise (its noise floor is a fixed fraction of the
        outcome variance). The local fit starts from the default hyperparameters
        (it depends on the local trials only) and leaves the warm start of the
        next global fit alone.
        """
        u_ok, y_ok = self._train
        best, model = self.best(), self.objective_model_
        assert best is not None and model is not None  # a trust region needs both
        centre = best.u
        half = 0.5 * (bounds[1] - bounds[0])
        lo, hi = centre - 2.0 * half, centre + 2.0 * half
        inside = np.all((u_ok >= lo - 1e-12) & (u_ok <= hi + 1e-12), axis=1)
        kernel: Any = model.covar_module
        ls = getattr(kernel, "base_kernel", kernel).lengthscale.detach().cpu().numpy().reshape(-1)
        dist = np.linalg.norm((u_ok - centre) / ls, axis=1)
        keep = inside.copy()
        keep[np.argsort(dist, kind="stable")[: self.n_initial]] = True
        if keep.all():
            return u_ok, y_ok  # the region spans every trial: the global model is local
        u_loc, y_loc = u_ok[keep], y_ok[keep]
        local: Any = fit_objective_model(u_loc, y_loc,
                                         max_attempts=self.settings.max_fit_attempts)
        self.objective_model_ = local
        self.model_ = combined_model(local, self.feasibility_model_)
        return u_loc, y_loc

    def _propose_composite(self, q: int, pending_u: np.ndarray) -> tuple[np.ndarray, str]:
        with _torch_threads(self.settings.torch_threads):
            self._fit_composite()
            kind = self._composite_kind()
            self.trust_region_bounds_ = None
            emulator = self.emulator_
            if emulator is None:
                raise RuntimeError("Search: the emulator is not fitted.")
            if emulator.n_components_ == 0:  # outputs all alike so far: space-filling
                return np.array([self._sobol_next() for _ in range(q)]), EXPLORE
            u_ok, chi2 = self._train_composite
            seed = derived_seed(self.settings.seed, "proposal", self._next_trial)
            with torch.random.fork_rng():
                torch.manual_seed(seed)
                acquisition = composite_acquisition(
                    emulator, self._require_layout(), float(np.min(chi2)),
                    pending_u=pending_u if len(pending_u) else None,
                    feasibility=self.feasibility_model_, mc_samples=self.settings.mc_samples,
                    seed=seed % 2**31)
                self.acquisition_ = acquisition
                cand = propose_composite(
                    acquisition, self.dim, q, u_ok=u_ok, chi2_ok=chi2,
                    num_restarts=self.settings.num_restarts,
                    raw_samples=self.settings.raw_samples, seed=seed % 2**31, kind=kind)
            return cand, kind

    def _optimize(self, q: int, pending_u: np.ndarray, u_ok: np.ndarray, y_ok: np.ndarray,
                  seed: int, bounds: np.ndarray | None = None) -> np.ndarray:
        if self.model_ is None:
            raise RuntimeError("Search: the GP is not fitted yet (call fit() first).")
        acquisition = make_acquisition(
            self.model_,
            u_ok,
            y_ok,
            q=q,
            pending_u=pending_u if len(pending_u) else None,
            has_feasibility=self.feasibility_model_ is not None,
            mc_samples=self.settings.mc_samples,
            seed=seed % 2**31,
        )
        self.acquisition_ = acquisition
        cand, _ = optimize_acquisition(
            acquisition,
            self.dim,
            q=q,
            num_restarts=self.settings.num_restarts,
            raw_samples=self.settings.raw_samples,
            seed=seed % 2**31,
            bounds=bounds,
        )
        return cand

    def tell(self, trial: int, value: float | None, ok: bool | None = None,
             outputs: np.ndarray | None = None) -> Observation:
        """Record the result of a proposed trial.

        Parameters
        ----------
        trial : int
            Trial index from :meth:`ask`.
        value : float or None
            Objective to minimise (reduced chi-square). ``None`` or non-finite
            marks a failed run; a failed run is never fed to the objective GP.
        ok : bool, optional
            Force the status; default: ok when ``value`` is finite (and >= 0 with
            the log transform; values below :data:`LOG_FLOOR` count as it).
        outputs : array_like of shape (m,), optional
            The trial's output vector (:meth:`outputs_of` of its predictions),
            for the composite strategy; ignored for a failed trial.

        Returns
        -------
        Observation
        """
        if trial not in self._pending:
            raise InputDataError(
                f"tell: trial {trial!r} is not pending; pending trials are "
                f"{sorted(self._pending)}."
            )
        p = self._pending.pop(trial)
        v = math.nan if value is None else float(value)
        good = math.isfinite(v) and (self.settings.objective_transform != "log" or v >= 0)
        if ok is None:
            ok = good
        if ok and not good:
            raise InputDataError(
                f"tell: trial {trial} marked ok with an unusable value {value!r}; pass a "
                "finite value (>= 0 for the log transform) or ok=False."
            )
        out = None
        if ok and outputs is not None and self.layout is not None:
            out = np.asarray(outputs, dtype=float).reshape(-1)
            if out.shape != (self.layout.n_outputs,) or not np.all(np.isfinite(out)):
                raise InputDataError(
                    f"tell: outputs of trial {trial} must be {self.layout.n_outputs} finite "
                    f"values (Search.outputs_of(predictions)); got shape {out.shape}."
                )
        obs = Observation(p.trial, p.batch, p.source, p.u, v if ok else math.nan, bool(ok), out)
        self._observations[trial] = obs
        return obs

    # --------------------------------------------------------------- resume
    def restore(self, finished: Sequence[Observation], in_flight: Sequence[Proposal],
                state: dict[str, int],
                warm_start: dict[str, dict[str, list[float]]] | None = None,
                kinds: dict[int, str] | dict[str, str] | None = None) -> None:
        """Rebuild the search from a log (used by resume).

        Parameters
        ----------
        finished : sequence of Observation
            Completed trials.
        in_flight : sequence of Proposal
            Trials handed out but unfinished at the interruption; they become
            pending again and must be re-run and told.
        state : dict
            Counters ``next_trial``, ``next_batch``, ``n_sobol``, ``n_user``.
        warm_start : dict, optional
            Hyperparameters of the last fit before the interruption
            (:meth:`warm_start`), so the resumed search proposes what the
            uninterrupted one would have.
        kinds : dict, optional
            :attr:`proposal_kinds` before the interruption (keys may be strings,
            as in JSON); the trust-region state is replayed from them and the
            finished trials. Without it every proposal counts as global.
        """
        self._observations = {o.trial: o for o in finished}
        self._pending = {p.trial: p for p in in_flight}
        self._next_trial = int(state["next_trial"])
        self._next_batch = int(state["next_batch"])
        self._n_sobol = int(state["n_sobol"])
        self._n_user = int(state["n_user"])
        self._warm = {k: {n: list(map(float, v)) for n, v in d.items()}
                      for k, d in (warm_start or {}).items()}
        self._kinds = {int(t): str(k) for t, k in (kinds or {}).items()}

    def warm_start(self) -> dict[str, dict[str, list[float]]]:
        """Raw GP hyperparameters of the last fit (JSON-ready), for :meth:`restore`."""
        return {k: {n: list(v) for n, v in d.items()} for k, d in self._warm.items()}

    def state(self) -> dict[str, int]:
        """Counters needed by :meth:`restore`."""
        return {
            "next_trial": self._next_trial,
            "next_batch": self._next_batch,
            "n_sobol": self._n_sobol,
            "n_user": self._n_user,
        }

    # ------------------------------------------------------------ notebook
    def predict(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """GP posterior mean and standard deviation of the objective at ``u``.

        Parameters
        ----------
        u : array_like of shape (n, d)
            Unit-cube points.

        Returns
        -------
        mean, std : ndarray of shape (n,)
            In the modelled outcome: ``log(reduced_chi2)`` (log transform) or
            the value itself (identity), i.e. sign restored for minimisation.
            Under the composite strategy: the mean and standard deviation of
            ``log(reduced_chi2)`` over 256 emulator draws of the outputs.
        """
        if self._composite_ready():
            if self.emulator_ is None:
                self.fit()
            emulator, layout = self.emulator_, self._require_layout()
            if emulator is None:
                raise RuntimeError("Search: the emulator could not be fitted.")
            u = np.asarray(u, dtype=float).reshape(-1, self.dim)
            draws = emulator.sample(u, 256, seed=self.settings.seed)  # (s, n, m)
            disc = layout.discrepancy_from_unit(u)
            log_r = np.log(np.maximum(
                np.asarray(layout.chi2(draws, disc)) / layout.dof(), 1e-300))
            return log_r.mean(axis=0), log_r.std(axis=0)
        if self.objective_model_ is None:
            self.fit()
        objective = self.objective_model_
        if objective is None:
            raise RuntimeError("Search: the objective GP could not be fitted.")
        x = torch.as_tensor(np.asarray(u, dtype=float).reshape(-1, self.dim), dtype=torch.float64)
        with torch.no_grad():
            post = objective.posterior(x)
            mean = -post.mean.reshape(-1).numpy()
            std = post.variance.clamp_min(0).sqrt().reshape(-1).numpy()
        return mean, std
