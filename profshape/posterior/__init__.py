"""Posterior over shapes: sampling, credible bands, predictions and family comparison.

Entry points:

- :class:`PosteriorSettings` and :func:`sample_posterior` → :class:`PosteriorResult`
  (MAP coefficients, posterior sample, diagnostics, predictive check);
- :func:`posterior_bands` → :class:`PosteriorBands` (profile band along z,
  ion-velocity bands per operating point, scalar table);
- :func:`predict_scalars` at data or off-data operating points (extrapolation flagged);
- :func:`compare_families` → ranking table by BIC (and an evidence estimate).

See :mod:`profshape.posterior.sample` for how the surrogate's uncertainty is
accounted for.
"""

from __future__ import annotations

from .bands import PosteriorBands, posterior_bands, profile_band
from .check import PosteriorCheck, PosteriorCheckWarning
from .compare import compare_families
from .predict import predict_scalars
from .result import PosteriorResult
from .sample import sample_posterior
from .settings import PosteriorSettings

__all__ = [
    "PosteriorBands",
    "PosteriorCheck",
    "PosteriorCheckWarning",
    "PosteriorResult",
    "PosteriorSettings",
    "compare_families",
    "posterior_bands",
    "predict_scalars",
    "profile_band",
    "sample_posterior",
]
