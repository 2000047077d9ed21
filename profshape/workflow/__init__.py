"""The workflow on top of the library: calibration file -> search -> posterior -> outputs -> report.

- :mod:`~profshape.workflow.build`: objects built from a calibration file.
- :mod:`~profshape.workflow.folder`: the output folder (opened, read back, named);
  :mod:`~profshape.workflow.layout` names its files; :mod:`~profshape.workflow.folder_lock`
  keeps a second writer out.
- :mod:`~profshape.workflow.run`: the stages in order (:func:`calibrate`, :func:`resume`).
- :mod:`~profshape.workflow.after_search`: posterior, bands, predictions, checks (forward runs).
- :mod:`~profshape.workflow.report`: figures, summary and report, rendered from the files.
- :mod:`~profshape.workflow.export`, :mod:`~profshape.workflow.compare_runs`: the closure
  export and the comparison of runs; :mod:`~profshape.workflow.extend`: a larger budget on
  resume; :mod:`~profshape.workflow.stages`: the stage lines and bars.
"""

from __future__ import annotations

from .build import Calibration, ReportInputs, build_calibration, report_inputs
from .compare_runs import compare_runs
from .export import export_closure
from .folder import config_from_folder, new_folder_name, open_output_folder
from .report import rebuild_report, write_outputs
from .run import calibrate, resume, run_calibration

__all__ = [
    "Calibration",
    "ReportInputs",
    "build_calibration",
    "calibrate",
    "compare_runs",
    "config_from_folder",
    "export_closure",
    "new_folder_name",
    "open_output_folder",
    "rebuild_report",
    "report_inputs",
    "resume",
    "run_calibration",
    "write_outputs",
]
