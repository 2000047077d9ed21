"""Leave-one-point-out validation: closed-form check on a linear model, refusals, a short run."""

from __future__ import annotations

import json
import math
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from profshape import OperatingPoint
from profshape.data import DataSet, OperatingPointData, ScalarObservable
from profshape.exceptions import InputDataError
from profshape.forward import Prediction
from profshape.validate import BAND_Z_90, validate_run, validation_rows

VOLTS = np.array([200.0, 250.0, 300.0, 350.0])
SIGMA = 2.0
A_TRUE = 0.3


def _linear_case(pressures=(1e-3, 2e-3, 3e-3, 4e-3)):
    rng = np.random.default_rng(3)
    y = A_TRUE * VOLTS + rng.normal(0, SIGMA, VOLTS.size)
    ds = DataSet([OperatingPointData(
        OperatingPoint(f"p{i}", v, 5e-6, background_pressure_Pa=pb),
        scalars={"thrust": ScalarObservable("thrust", yi, SIGMA)})
        for i, (v, yi, pb) in enumerate(zip(VOLTS, y, pressures, strict=True))])
    grid = np.linspace(0.25, 0.35, 2001)  # trials on a fine grid of the one parameter a
    trials = [{f"p{i}": Prediction("ok", scalars={"thrust": a * v}) for i, v in enumerate(VOLTS)}
              for a in grid]
    return ds, y, trials


def test_linear_model_matches_the_closed_form_posterior():
    ds, y, trials = _linear_case()
    table, summary = validation_rows(ds, trials)
    for k in range(VOLTS.size):
        keep = np.arange(VOLTS.size) != k
        # conjugate Gaussian linear model with a flat prior: a ~ N(a_hat, 1 / sum(V^2/s^2))
        prec = np.sum(VOLTS[keep] ** 2) / SIGMA**2
        a_hat = np.sum(VOLTS[keep] * y[keep]) / SIGMA**2 / prec
        row = table.iloc[k]
        assert row["predicted"] == pytest.approx(a_hat * VOLTS[k], rel=1e-6)
        assert row["model_sd"] == pytest.approx(VOLTS[k] / math.sqrt(prec), rel=1e-3)
        sd = math.sqrt(VOLTS[k] ** 2 / prec + SIGMA**2)
        assert row["band_high"] - row["band_low"] == pytest.approx(2 * BAND_Z_90 * sd, rel=1e-3)
        assert row["inside_90"] == (abs(row["z_score"]) <= BAND_Z_90)
    assert summary["mape_discharge_current_percent"] is None
    assert summary["mape_thrust_percent"] == pytest.approx(
        100 * np.median(np.abs(table["relative_error"])))
    # the end points lie outside the others' voltage range: flagged
    assert summary["extrapolated_points"] == ["p0", "p3"]


def test_zero_pressure_is_flagged_and_few_points_refused():
    ds, _, trials = _linear_case(pressures=(1e-3, 2e-3, 0.0, 4e-3))
    _, summary = validation_rows(ds, trials)
    assert "zero background pressure (space)" in summary["points"]["p2"]["extrapolation_reason"]
    small = DataSet(list(ds)[:2])
    with pytest.raises(InputDataError, match=r"at least 3 operating points; the run has 2"):
        validation_rows(small, trials)


EXAMPLE_CODE = Path(__file__).resolve().parents[1] / "forward" / "example_code.py"


@pytest.mark.slow
def test_validate_run_writes_its_files(tmp_path):
    from profshape.cli import main

    z = np.linspace(0.004, 0.055, 8)
    points = ""
    for label, volts, pb in (("a", 250.0, 1e-3), ("b", 300.0, 2e-3), ("c", 350.0, 0.0)):
        u = 1000.0 + (volts / 300.0) ** 0.5 * 15000.0 / (1 + np.exp(-(z - 0.026) / 0.004))
        pd.DataFrame({"z_m": z, "ion_velocity_m_s": u, "sigma_ion_velocity_m_s": 500.0}).to_csv(
            tmp_path / f"lif_{label}.csv", index=False)
        points += textwrap.dedent(f"""
            [[operating_points]]
            label = "{label}"
            discharge_voltage_V = {volts}
            anode_mass_flow_kg_s = 5e-6
            propellant = "xenon"
            background_pressure_Pa = {pb}
            ion_velocity_file = "lif_{label}.csv"
            scalars.discharge_current = {{ value = {1.1 * 5e-6 / 2.18e-25 * 1.602e-19:.5g}, sigma = 0.2, unit = "A" }}
        """)
    (tmp_path / "cal.toml").write_text(points + textwrap.dedent(f"""
        [device]
        preset = "demo"
        [shape]
        family = "smooth_step"
        [forward_model]
        kind = "external"
        command = [{json.dumps(sys.executable)}, {json.dumps(str(EXAMPLE_CODE))}, "{{input}}"]
        [search]
        budget = 6
        n_initial = 6
        seed = 2
        [posterior]
        enabled = false
    """))
    assert main(["calibrate", str(tmp_path / "cal.toml"), "--out", str(tmp_path / "run"),
                 "--quiet"]) == 0
    assert main(["validate", str(tmp_path / "run")]) == 0
    summary = json.loads((tmp_path / "run" / "validation.json").read_text())
    table = pd.read_parquet(tmp_path / "run" / "validation.parquet")
    assert set(table["label"]) == {"a", "b", "c"} and len(table) == 3 * 9
    assert summary["points"]["c"]["extrapolation"]
    assert summary["mape_discharge_current_percent"] is not None
    assert summary == validate_run(tmp_path / "run") | {"files": summary["files"]}
