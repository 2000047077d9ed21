"""The [closure] table of a calibration file: parsing, refusals naming the key, a short run."""

from __future__ import annotations

import json
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from profshape.config import load_config
from profshape.exceptions import ConfigError
from profshape.workflow import build_calibration, calibrate

EXAMPLE_CODE = Path(__file__).resolve().parents[1] / "forward" / "example_code.py"


def _write(tmp_path: Path, closure: str, budget: int = 7, v2: float = 260.0) -> Path:
    z = np.linspace(0.004, 0.055, 10)
    for label in ("a", "b"):
        pd.DataFrame({"z_m": z, "ion_velocity_m_s": 1000.0 + 15000.0 / (1 + np.exp(-(z - 0.026) / 0.004)),
                      "sigma_ion_velocity_m_s": 400.0}).to_csv(tmp_path / f"lif_{label}.csv", index=False)
    text = textwrap.dedent(f"""
        [[operating_points]]
        label = "a"
        discharge_voltage_V = 300.0
        anode_mass_flow_kg_s = 5e-6
        propellant = "xenon"
        ion_velocity_file = "lif_a.csv"

        [[operating_points]]
        label = "b"
        discharge_voltage_V = {v2}
        anode_mass_flow_kg_s = 5e-6
        propellant = "xenon"
        ion_velocity_file = "lif_b.csv"

        [device]
        preset = "demo"

        [shape]
        family = "smooth_step"

        [forward_model]
        kind = "external"
        command = [{json.dumps(sys.executable)}, {json.dumps(str(EXAMPLE_CODE))}, "{{input}}"]
        timeout_s = 30

        [search]
        budget = {budget}
        n_initial = 6
        seed = 1
        num_restarts = 2
        raw_samples = 32

        [posterior]
        enabled = false
    """) + textwrap.dedent(closure)
    path = tmp_path / "cal.toml"
    path.write_text(text)
    return path


CLOSURE = """
    [closure]
    features = [{ field = "discharge_voltage_V" }]
    coefficients = ["transition_z_m"]
    slope_bounds = { transition_z_m = [-0.003, 0.003] }
    intercept_bounds = { transition_z_m = [0.02, 0.032] }
"""


def test_closure_table_builds_slopes_and_intercept_bounds(tmp_path):
    cal = build_calibration(load_config(_write(tmp_path, CLOSURE)), tmp_path / "out",
                            progress=False)
    p = cal.problem
    assert p.names[-1] == "transition_z_m__per__discharge_voltage_V"
    np.testing.assert_allclose(p.bounds[-1], [-0.003, 0.003])
    np.testing.assert_allclose(p.bounds[p.names.index("transition_z_m")], [0.02, 0.032])


@pytest.mark.parametrize("closure, v2, match", [
    ('[closure]\nfeatures = [{ field = "discharge_voltge_V" }]\n', 260.0,
     r"closure.features\[1\].field.*'discharge_voltge_V' is not a numeric operating-point field"),
    ('[closure]\nfeatures = [{ field = "discharge_voltage_V" }]\n', 300.0,
     r"closure.features\[1\].field.*'discharge_voltage_V' is constant \(300\) across"),
    ('[closure]\nfeatures = [{ field = "discharge_voltage_V", flor = 1.0 }]\n', 260.0,
     r"closure.features\[1\].flor.*unknown key \(did you mean 'floor'\?\)"),
    ('[closure]\nfeatures = [{ field = "discharge_voltage_V" }]\ncoefficients = ["transition_zm"]\n',
     260.0, r"closure.coefficients.*did you mean 'transition_z_m'"),
    ('[closure]\nfeatures = [{ field = "discharge_voltage_V" }]\n'
     'slope_bounds = { transition_z_m = [0.003, -0.003] }\n', 260.0,
     r"closure.slope_bounds.transition_z_m.*lower < upper; got \[0.003, -0.003\]"),
])
def test_bad_closure_refused_naming_the_key(tmp_path, closure, v2, match):
    with pytest.raises(ConfigError, match=match):
        build_calibration(load_config(_write(tmp_path, closure, v2=v2)), tmp_path / "out",
                          progress=False)


@pytest.mark.slow
def test_calibrate_runs_a_closure_calibration(tmp_path):
    summary = calibrate(_write(tmp_path, CLOSURE), tmp_path / "run", progress=False)
    trials = pd.read_parquet(tmp_path / "run" / "trials.parquet")
    assert "transition_z_m__per__discharge_voltage_V" in trials.columns
    assert (trials["status"] == "ok").sum() >= 6
    assert "transition_z_m__per__discharge_voltage_V" in json.dumps(summary, default=str)
