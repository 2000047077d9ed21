"""The bundled "pressure" scenario: its file builds a d = 12 closure; space is an extrapolation."""

from __future__ import annotations

import json

import numpy as np
import pytest

from profshape.config import parse_config
from profshape.data import load_dataset
from profshape.exceptions import InputDataError
from profshape.scenarios import scenario_config_text, scenario_folder
from profshape.workflow import build_calibration


def test_scenario_builds_a_closure_with_twelve_parameters(tmp_path):
    text, path = scenario_config_text("pressure", budget=5)
    cal = build_calibration(parse_config(text, path=path, base_dir=path.parent), tmp_path,
                            progress=False)
    p = cal.problem
    assert p.dim == 12 and cal.search_settings.budget == 5
    space = [q for q in cal.prediction_points if q.background_pressure_Pa == 0.0]
    assert space and "below the feature floor" in p.closure.extrapolation_reason(space[0])
    inside = p.dataset.operating_points[2]
    assert p.closure.extrapolation_reason(inside) == ""


def test_scenario_data_hold_the_observables_and_the_truth():
    folder = scenario_folder("pressure")
    ds = load_dataset(folder)
    assert len(ds) == 6 and len({q.background_pressure_Pa for q in ds.operating_points}) == 3
    assert all("plasma_potential" in d.profiles for d in ds)
    assert all({"thrust", "discharge_current", "discharge_current_rms_amplitude"} <= set(d.scalars)
               for d in ds)
    truth = json.loads((folder / "truth.json").read_text())
    z = np.array([t["transition_z_m"] for t in truth.values()])
    assert set(truth) == set(ds.labels) and np.ptp(z) > 1e-3  # the truth moves with the point


def test_unknown_scenario_refused():
    with pytest.raises(InputDataError, match=r"--scenario 'presure' is unknown"):
        scenario_folder("presure")
