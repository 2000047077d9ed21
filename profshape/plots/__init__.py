"""Figures of a calibration, rebuilt from plain data (no forward runs).

Every function takes DataFrames, arrays or result objects (as saved in a
calibration folder), draws on a matplotlib Figure without pyplot (headless,
Agg), returns the Figure and, given ``paths``, saves it to each (PNG, SVG, ...).

- :func:`plot_fit`: data with error bars, best fit and bands per operating point;
- :func:`plot_profile_band`: the anomalous-profile band with the best shape;
- :func:`plot_search_trace`: best reduced chi-square against trial, failures marked;
- :func:`plot_pairs`: pairwise coefficient scatter shaded by misfit, posterior overlaid;
- :func:`plot_shape_gallery`: the proposed shapes in trial order.

matplotlib is imported on first use.
"""

from __future__ import annotations

from .compare import plot_comparison
from .fit import best_fit_from_trials, plot_fit, point_title
from .gallery import gallery_selection, plot_shape_gallery, shapes_from_trials
from .pairs import plot_pairs
from .profile import plot_profile_band
from .trace import plot_search_trace

__all__ = [
    "best_fit_from_trials",
    "gallery_selection",
    "plot_comparison",
    "plot_fit",
    "plot_pairs",
    "plot_profile_band",
    "plot_search_trace",
    "plot_shape_gallery",
    "point_title",
    "shapes_from_trials",
]
