"""Posterior over shapes: sampling, credible bands, predictions and family comparison.

Entry points:

- :class:`PosteriorSettings` and :func:`sample_posterior` → :class:`PosteriorResult`
  (MAP coefficients, posterior sample, diagnostics, predictive check);
- :func:`posterior_bands` → :class:`PosteriorBands` (profile band along z,
  ion-velocity bands per operating point, scalar table);
- :func:`predict_scalars` at data or off-data operating points (extrapolation flagged);
- :func:`compare_families` → ranking table by BIC (and an evidence estimate).

See :mod:`profshape.posterior.sample` for how the surrogate's uncertainty is
accounted for. The names below are imported on first use (PEP 562), so that
importing ``profshape.posterior.settings`` (as the calibration file's checks do)
does not load torch.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from ..exceptions import PosteriorCheckWarning
from ..lazy_exports import lazy_exports

if TYPE_CHECKING:
    from .bands import PosteriorBands, posterior_bands, profile_band
    from .check import PosteriorCheck
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

_WHERE = {
    "PosteriorBands": ".bands",
    "posterior_bands": ".bands",
    "profile_band": ".bands",
    "PosteriorCheck": ".check",
    "compare_families": ".compare",
    "predict_scalars": ".predict",
    "PosteriorResult": ".result",
    "sample_posterior": ".sample",
    "PosteriorSettings": ".settings",
}

__getattr__, __dir__ = lazy_exports(__name__, _WHERE, __all__, globals())
