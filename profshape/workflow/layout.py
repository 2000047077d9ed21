"""The names of the files and folders of an output folder, each written once.

An output folder holds everything a calibration needs to be resumed or
re-reported without the original file: :data:`CONFIG_COPY` (a copy of the
file), :data:`RUN_FILE` (where relative paths resolve, a fingerprint of the
file, the package version), :data:`TRIALS_FILE` (the trial log) and, once
finished, the posterior, bands, predictions, figures, summary and report.
"""

from __future__ import annotations

from ..posterior.bands import band_file
from ..posterior.result import META_FILE

__all__ = [
    "BANDS_DIR", "BANDS_EMULATED_FILE", "BANDS_PROFILE_FILE", "CHECKS_FILE", "CONFIG_COPY",
    "FIGURES_DIR", "NOTES_FILE",
    "POSTERIOR_DIR", "POSTERIOR_FILE", "PREDICTIONS_FILE", "REPORT_FILE", "RUN_FILE",
    "SEARCH_FILE", "STAGE_FILE", "SUMMARY_FILE", "TRIALS_FILE",
]

#: Where relative paths resolve, the file's fingerprint and the package version.
RUN_FILE = "run.json"
#: The calibration file, copied.
CONFIG_COPY = "calibration.toml"
#: The trial log (with its ``.json`` sidecar and ``.journal``).
TRIALS_FILE = "trials.parquet"
#: The search's stop reason, best trial and coefficients on a bound.
SEARCH_FILE = "search.json"
#: The folder of :meth:`profshape.posterior.PosteriorResult.save`.
POSTERIOR_DIR = "posterior"
#: The posterior's metadata inside :data:`POSTERIOR_DIR` (its presence marks a posterior).
POSTERIOR_FILE = META_FILE
#: The profile band inside :data:`BANDS_DIR` (its presence marks the bands).
BANDS_PROFILE_FILE = band_file("profile")
#: What the posterior stage spent, inside :data:`POSTERIOR_DIR`.
STAGE_FILE = "stage.json"
#: The folder of :meth:`profshape.posterior.PosteriorBands.save`.
BANDS_DIR = "bands"
#: The emulated bands, inside :data:`BANDS_DIR`.
BANDS_EMULATED_FILE = "bands_emulated.parquet"
#: Scalar predictions with bands, at the data's points and the extra prediction points.
PREDICTIONS_FILE = "predictions.csv"
#: The checks' verdicts.
CHECKS_FILE = "checks.json"
#: Notes of the run (skipped or failed stages, warnings of the posterior stage).
NOTES_FILE = "notes.json"
#: The figures' folder.
FIGURES_DIR = "figures"
#: The machine-readable summary.
SUMMARY_FILE = "summary.json"
#: The report.
REPORT_FILE = "report.md"
