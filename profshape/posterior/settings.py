"""Settings of posterior sampling, checked once when they are made."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from numbers import Integral, Real
from typing import Any, Literal

from ..exceptions import InputDataError
from ..validation import Constraint, InstanceOf, Interval, Options, validate_dataclass

__all__ = ["CONSTRAINTS", "FIXES", "PosteriorSettings", "check_levels"]

SamplingMethod = Literal["surrogate", "exact"]
SurrogateOf = Literal["outputs", "log_likelihood"]


def _at_least(low: int) -> Interval:
    return Interval(Integral, low, None, closed="left")


#: Constraints of every field but ``band_levels`` (a sequence, :func:`check_levels`);
#: see :mod:`profshape.validation`.
CONSTRAINTS: dict[str, list[Constraint | None]] = {
    "method": [Options(str, ("surrogate", "exact"))],
    "surrogate_of": [Options(str, ("outputs", "log_likelihood"))],
    "n_walkers": [_at_least(2)],
    "n_steps": [_at_least(2)],
    "burn_in": [_at_least(0)],
    "thin": [_at_least(1)],
    "n_gp_draws": [_at_least(0)],
    "n_features": [_at_least(16)],
    "n_refine_rounds": [_at_least(0)],
    "refine_until_agreement": [InstanceOf(bool)],
    "n_refine_draws": [_at_least(1)],
    "n_check_draws": [_at_least(0)],
    "check_tolerance_nats": [Interval(Real, 0, None, closed="neither")],
    "check_max_disagree_fraction": [Interval(Real, 0, 1, closed="both")],
    "check_max_failed_fraction": [Interval(Real, 0, 1, closed="both")],
    "log_likelihood_floor_nats": [Interval(Real, 0, None, closed="neither")],
    "max_gp_trials": [_at_least(4)],
    "stop_on_autocorr": [InstanceOf(bool)],
    "forward_budget": [_at_least(0)],
    "refine_threshold_nats": [Interval(Real, 0, None, closed="neither")],
    "n_ensembles": [_at_least(1)],
    "seed": [_at_least(0), None],
}
FIXES = {
    "n_walkers": "Use an even number such as 32.",
    "n_steps": "Use a few thousand steps.",
    "burn_in": "Use 0 for no burn-in.",
    "thin": "Use 1 to keep all.",
    "n_gp_draws": "Use 0 to sample on the GP mean only.",
    "n_features": "Use about 1024.",
    "n_refine_rounds": "Use 0 for no refinement.",
    "n_refine_draws": "Use about 16.",
    "n_check_draws": "Use 0 to skip the check.",
    "max_gp_trials": "Use a few hundred.",
    "forward_budget": "Use about 32 (0: no forward run; no check).",
    "n_ensembles": "Use about 4.",
    "refine_threshold_nats": "Use about 1.",
    "log_likelihood_floor_nats": "Use about 150.",
    "seed": "Use a non-negative integer or None.",
}


def check_levels(levels: Any, field_name: str = "band_levels") -> tuple[float, ...]:
    """Validate credible levels: a non-empty sequence of numbers in (0, 1), returned sorted."""
    try:
        values = tuple(float(v) for v in levels)
    except (TypeError, ValueError):
        raise InputDataError(
            f"{field_name} must be a sequence of probabilities such as (0.68, 0.95); "
            f"got {levels!r}."
        ) from None
    if not values:
        raise InputDataError(f"{field_name} must hold at least one level; got {levels!r}.")
    bad = [v for v in values if not (0.0 < v < 1.0)]
    if bad:
        raise InputDataError(
            f"{field_name} must lie strictly between 0 and 1 (0.95 for a 95 % band); got {bad}."
        )
    return tuple(sorted(set(values)))


@dataclass(frozen=True)
class PosteriorSettings:
    """How the posterior is sampled and checked.

    Parameters
    ----------
    method : {"surrogate", "exact"}, default="surrogate"
        ``"surrogate"``: sample on a Gaussian-process model of the
        log-likelihood fitted to the trials (cheap; the only practical choice
        with a costly forward model). ``"exact"``: every sampler step runs the
        forward model (``n_walkers * n_steps`` runs; for cheap models and tests).
    surrogate_of : {"outputs", "log_likelihood"}, default="outputs"
        What the surrogate models with ``method="surrogate"``. ``"outputs"``:
        the forward model's outputs at the measured positions and the
        measured scalars (:class:`profshape.emulator.OutputEmulator`), with the
        emulator's predictive variance added to the data variance (Kennedy and
        O'Hagan 2001; Higdon et al. 2008); needs the trials' stored
        predictions, else falls back to ``"log_likelihood"`` with a warning.
        ``"log_likelihood"``: a GP of the log-likelihood sampled through GP
        realisations (for objectives that give only a number).
    n_walkers : int, default=32
        Walkers of the affine-invariant ensemble sampler, per GP realisation.
        Must be even and at least twice the number of coefficients (the
        sampler's requirement).
    n_steps : int, default=10000
        Most steps per walker, burn-in included (see ``stop_on_autocorr``).
    burn_in : int, default=500
        Leading steps discarded, ``0 <= burn_in < n_steps``.
    thin : int, default=1
        Keep every ``thin``-th step after burn-in.
    n_gp_draws : int, default=8
        Number of GP realisations (pathwise posterior function samples) the
        posterior is sampled on and pooled over, so that the surrogate's own
        uncertainty widens the posterior. 0 samples on the GP mean only.
    n_features : int, default=1024
        Random Fourier features per GP realisation.
    n_refine_rounds : int, default=3
        Most rounds of surrogate refinement: each runs ``n_refine_draws``
        posterior draws through the forward model, adds them to the GP's
        training data, refits and samples again.
    refine_until_agreement : bool, default=True
        Stop refining after the first round whose forward runs agree with the
        surrogate (disagreeing and failed fractions within the check limits).
    n_refine_draws : int, default=16
        Forward runs per refinement round.
    n_check_draws : int, default=16
        Posterior draws run through the forward model for the posterior
        predictive check after the last sampling (0 skips the check).
    check_tolerance_nats : float, default=1.0
        Extra tolerance [nats] added in quadrature to the surrogate's predictive
        standard deviation when comparing it to a forward run.
    check_max_disagree_fraction : float, default=0.25
        Warn when more than this fraction of checked draws disagree (``|z| > 3``).
    check_max_failed_fraction : float, default=0.25
        Warn when more than this fraction of checked draws fail to run.
    log_likelihood_floor_nats : float, default=150.0
        Trials whose log-likelihood lies more than this below the best are
        clipped to ``best - floor`` before the GP fit, so the GP's scale is set
        by the region that matters. The clipped plateau still holds posterior
        mass ``exp(-floor)`` times its volume, against a peak of volume about
        ``prod(sigma_i)`` (unit cube): the floor must exceed ``-ln`` of that
        volume by a margin. 40 nats proved too shallow on a 4-coefficient
        problem with the built-in solver (the plateau took the mass); 150 covers
        narrow posteriors in up to ~20 dimensions.
    max_gp_trials : int, default=400
        At most this many ok trials (the best ones) train the GP.
    stop_on_autocorr : bool, default=True
        Stop each chain before ``n_steps`` once its kept part is longer than 50
        integrated autocorrelation times (emcee's reliability threshold) and the
        estimate changed by less than 1 % since the last check (every 100
        steps); ``n_steps`` is then the most steps.
    forward_budget : int, default=32
        Most forward runs of the posterior stage in :func:`sample_posterior`
        (refinement, MAP, predictive check; each runs every operating point).
        ``n_check_draws`` + 1 are kept for the check and the MAP; refinement
        gets the rest. Bands taken from an emulator need no further run.
        Common practice, no source: a budget comparable to a search's.
    refine_threshold_nats : float, default=1.0
        Refinement goes on (within the budget) until the surrogate's or
        emulator's stated error of the log-likelihood at posterior draws is
        below this [nats] at 90 % of the draws and the forward runs agree with
        it. An error of 1 nat changes the posterior density by a factor e.
    n_ensembles : int, default=4
        Independent walker ensembles, started in distinct basins of the
        log-likelihood (local optima of the surrogate or emulator from the best
        trials) and pooled with weights from a Laplace estimate of each basin's
        mass; ensembles that end in the same basin share its weight. With GP
        realisations (``n_gp_draws > 0``) each realisation is one ensemble.
    band_levels : tuple of float, default=(0.68, 0.95)
        Central credible levels of intervals and bands.
    seed : int or None, default=0
        Seed of all random draws (walker starts, GP realisations, draw picks).
    """

    method: SamplingMethod = "surrogate"
    surrogate_of: SurrogateOf = "outputs"
    n_walkers: int = 32
    n_steps: int = 10000
    burn_in: int = 500
    thin: int = 1
    n_gp_draws: int = 8
    n_features: int = 1024
    n_refine_rounds: int = 3
    refine_until_agreement: bool = True
    n_refine_draws: int = 16
    n_check_draws: int = 16
    check_tolerance_nats: float = 1.0
    check_max_disagree_fraction: float = 0.25
    check_max_failed_fraction: float = 0.25
    log_likelihood_floor_nats: float = 150.0
    max_gp_trials: int = 400
    stop_on_autocorr: bool = True
    forward_budget: int = 32
    refine_threshold_nats: float = 1.0
    n_ensembles: int = 4
    band_levels: tuple[float, ...] = field(default=(0.68, 0.95))
    seed: int | None = 0

    def __post_init__(self) -> None:
        validate_dataclass(self, CONSTRAINTS, fixes=FIXES)
        nw = self.n_walkers
        if nw % 2:
            raise InputDataError(
                f"PosteriorSettings.n_walkers must be even (the ensemble is split in halves); "
                f"got {nw}. Use {nw + 1}."
            )
        if self.burn_in >= self.n_steps:
            raise InputDataError(
                f"PosteriorSettings.burn_in must be smaller than n_steps = {self.n_steps}; got "
                f"{self.burn_in}. Lower burn_in or raise n_steps."
            )
        object.__setattr__(self, "band_levels", check_levels(self.band_levels,
                                                             "PosteriorSettings.band_levels"))

    @property
    def n_kept_steps(self) -> int:
        """Steps kept per walker after burn-in and thinning."""
        return len(range(self.burn_in, self.n_steps, self.thin))

    def to_dict(self) -> dict[str, Any]:
        """Plain-dict form (JSON-ready)."""
        d = asdict(self)
        d["band_levels"] = list(self.band_levels)
        return d
