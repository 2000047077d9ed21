"""The ``profshape solve`` command (argparse wiring, files, exit codes) in ``profshape.cli.solve``."""

from __future__ import annotations

import argparse
import json

import pandas as pd
import pytest

from profshape.cli.solve import add_parser


def _run(argv):
    parser = argparse.ArgumentParser()
    add_parser(parser.add_subparsers())
    args = parser.parse_args(argv)
    return args.func(args)


CASE = """
[device]
name = "test"
channel_length_m = 0.024
inner_radius_m = 0.032
outer_radius_m = 0.044
domain_length_m = 0.06
[device.magnetic_field]
peak_T = 0.017
peak_z_m = 0.024
width_upstream_m = 0.011
width_downstream_m = 0.014
[operating_point]
label = "250V"
discharge_voltage_V = 250
anode_mass_flow_kg_s = 4.5e-6
[profile]
family = "smooth_step"
coefficients = {log10_inner_level = -2.5, log10_outer_level = -1.0, transition_z_m = 0.024, transition_width_m = 0.002}
[solver]
n_cells = 60
"""


def test_solve_default_case_writes_outputs(tmp_path, capsys):
    rc = _run(["solve", "--out", str(tmp_path), "--n-cells", "60"])
    assert rc in (0, 1)
    cells = pd.read_csv(tmp_path / "cells.csv")
    assert len(cells) == 60 and "ion_velocity_m_s" in cells
    record = json.loads((tmp_path / "globals.json").read_text())
    assert record["globals"]["status"] in ("ok", "not_converged")
    assert (rc == 0) == (record["globals"]["status"] == "ok")
    assert "discharge_current_A" in capsys.readouterr().out


def test_solve_toml_case(tmp_path):
    case = tmp_path / "case.toml"
    case.write_text(CASE)
    rc = _run(["solve", str(case), "--out", str(tmp_path / "out")])
    record = json.loads((tmp_path / "out" / "globals.json").read_text())
    assert record["operating_point"]["discharge_voltage_V"] == 250.0
    assert record["globals"]["n_cells"] == 60
    assert rc == (0 if record["globals"]["status"] == "ok" else 1)


@pytest.mark.parametrize(
    ("text", "needle"),
    [
        ("[device]\nchanel_length_m = 0.02\n", "chanel_length_m"),
        ("[solver]\nn_cells = -3\n", "n_cells"),
        ("[operating_point]\nanode_mass_flow_kg_s = -1e-6\n", "anode_mass_flow_kg_s"),
        ("[operating_point]\npropellant = 'unobtainium'\n", "propellant"),
        ("[extra]\nx = 1\n", "extra"),
        ("not toml = = 1", "TOML"),
    ],
)
def test_bad_input_exit_code_2(tmp_path, capsys, text, needle):
    case = tmp_path / "bad.toml"
    case.write_text(text)
    assert _run(["solve", str(case), "--out", str(tmp_path / "o")]) == 2
    assert needle in capsys.readouterr().err


def test_missing_file_exit_code_2(tmp_path, capsys):
    assert _run(["solve", str(tmp_path / "nope.toml"), "--out", str(tmp_path)]) == 2
    assert "not found" in capsys.readouterr().err
