"""Bad input: a battery of malformed data, calibration files, bounds, points, programs, folders.

Every case goes through the ``profshape calibrate`` command (``profshape.cli.main``
in this process, plus a few real subprocesses), and must give exit code 2 and one
line ``profshape: error: ...`` on stderr that names what is wrong, with no
traceback; no result file of an earlier calibration may change.
"""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from profshape.cli import main
from reliability._faulty import GRID_M, TRUTH, clean_velocity, make_problem

HERE = Path(__file__).resolve().parent
PROGRAM = HERE / "_fault_program.py"

BASE = """\
title = "reliability bad-input base"

[[operating_points]]
label = "300V"
discharge_voltage_V = 300.0
anode_mass_flow_kg_s = 4.5e-6
propellant = "xenon"
ion_velocity_file = "lif_300.csv"

[[operating_points]]
label = "250V"
discharge_voltage_V = 250.0
anode_mass_flow_kg_s = 4.5e-6
propellant = "xenon"
ion_velocity_file = "lif_250.csv"

[shape]
family = "smooth_step"

[shape.bounds]
transition_z_m = [0.015, 0.038]

[forward_model]
kind = "external"
command = [PYTHON, PROGRAM, "{input}"]
timeout_s = 10

[search]
budget = 4
seed = 0
num_restarts = 2
raw_samples = 16

[posterior]
enabled = false
"""


def _lif(volts: float) -> pd.DataFrame:
    family = make_problem().family
    v = clean_velocity(family.profile(np.array(TRUTH))(GRID_M), volts)
    z = np.linspace(0.005, 0.055, 10)
    return pd.DataFrame({"z_m": z, "ion_velocity_m_s": np.round(np.interp(z, GRID_M, v)),
                         "sigma_ion_velocity_m_s": 300.0})


def _write_case(folder: Path, toml: str) -> Path:
    _lif(300.0).to_csv(folder / "lif_300.csv", index=False)
    _lif(250.0).to_csv(folder / "lif_250.csv", index=False)
    toml = toml.replace("PYTHON", json.dumps(sys.executable)).replace(
        "PROGRAM", json.dumps(str(PROGRAM)))
    (folder / "cal.toml").write_text(toml)
    return folder / "cal.toml"


def _csv(text: str):
    def edit(folder: Path) -> None:
        (folder / "lif_300.csv").write_text(textwrap.dedent(text))
    return edit


def _frame(change):
    def edit(folder: Path) -> None:
        df = _lif(300.0)
        df = change(df) if change(df) is not None else df
        df.to_csv(folder / "lif_300.csv", index=False)
    return edit


def _set(df, col, i, value):
    df[col] = df[col].astype(object)
    df.loc[i, col] = value
    return df


def _toml(old: str, new: str):
    def edit(text: str) -> str:
        assert old in text, old
        return text.replace(old, new, 1)
    return edit


#: (id, edit of the TOML text or None, edit of the case folder or None, fragment of the message)
CASES = [
    # ---------------------------------------------------------------- data files
    ("data-empty-file", None, _csv(""), "lif_300.csv: file is empty"),
    ("data-header-only", None, _csv("z_m,ion_velocity_m_s,sigma_ion_velocity_m_s\n"), "no data rows"),
    ("data-wrong-columns", None, _csv("z_m,velocity,sigma\n0.01,1000,100\n"), "missing column(s) ['ion_velocity_m_s'"),
    ("data-mm-column", None, _csv("z_mm,ion_velocity_m_s,sigma_ion_velocity_m_s\n10,1000,100\n"), "millimetres"),
    ("data-positions-in-mm", None, _frame(lambda d: d.assign(z_m=d["z_m"] * 1000)), "looks like millimetres"),
    ("data-nan-velocity", None, _frame(lambda d: _set(d, "ion_velocity_m_s", 3, np.nan)), "row 4"),
    ("data-inf-velocity", None, _frame(lambda d: _set(d, "ion_velocity_m_s", 2, np.inf)), "not finite"),
    ("data-negative-sigma", None, _frame(lambda d: _set(d, "sigma_ion_velocity_m_s", 1, -50.0)), "uncertainty must be > 0"),
    ("data-zero-sigma", None, _frame(lambda d: _set(d, "sigma_ion_velocity_m_s", 0, 0.0)), "uncertainty must be > 0"),
    ("data-text-in-number", None, _frame(lambda d: _set(d, "z_m", 5, "abc")), "'abc' is not a number"),
    ("data-duplicate-position", None, _frame(lambda d: _set(d, "z_m", 4, d["z_m"][3])), "repeats row"),
    ("data-velocity-in-km-s", None, _frame(lambda d: d.assign(ion_velocity_m_s=d["ion_velocity_m_s"] / 1000)), "km/s"),
    ("data-unknown-column", None, _frame(lambda d: d.assign(comment="x")), "unknown column(s) ['comment']"),
    ("data-outside-domain", None, _frame(lambda d: _set(d, "z_m", 9, 0.07)), "outside the model domain"),
    ("data-negative-sigma-z", None, _frame(lambda d: d.assign(sigma_z_m=-1e-4)), "position uncertainty must be >= 0"),
    ("data-binary-garbage", None, lambda f: (f / "lif_300.csv").write_bytes(bytes(range(256)) * 8), "lif_300.csv"),
    ("data-missing-file", _toml('"lif_250.csv"', '"nowhere.csv"'), None, "'nowhere.csv' not found"),
    # ---------------------------------------------------------- calibration file
    ("toml-syntax", _toml("[shape]", "[shape"), None, "not valid TOML"),
    ("toml-unknown-key", _toml("[search]", "[search]\nbudjet = 3"), None, "search.budjet"),
    ("toml-wrong-type", _toml("budget = 4", 'budget = "four"'), None, "search.budget"),
    ("toml-zero-budget", _toml("budget = 4", "budget = 0"), None, "search.budget"),
    ("toml-missing-family", _toml('family = "smooth_step"', ""), None, "shape.family"),
    ("toml-unknown-family", _toml('"smooth_step"', '"zigzag"'), None, "unknown family 'zigzag'"),
    ("toml-no-data", lambda t: t.split("[shape]")[0].split("[[operating_points]]")[0] + "[shape]" + t.split("[shape]")[1], None, "no data"),
    ("toml-unknown-model-kind", _toml('kind = "external"', 'kind = "magic"'), None, "forward_model.kind"),
    ("toml-command-missing", _toml('command = [PYTHON, PROGRAM, "{input}"]', ""), None, "forward_model.command"),
    ("toml-command-string", _toml('command = [PYTHON, PROGRAM, "{input}"]', 'command = "prog {input}"'), None, "forward_model.command"),
    ("toml-negative-timeout", _toml("timeout_s = 10", "timeout_s = -1"), None, "timeout_s"),
    ("toml-nan-timeout", _toml("timeout_s = 10", "timeout_s = nan"), None, "must be finite"),
    ("toml-band-level", _toml("enabled = false", "enabled = false\nband_levels = [1.5]"), None, "posterior.band_levels"),
    ("toml-negative-seed", _toml("seed = 0", "seed = -3"), None, "seed"),
    # ---------------------------------------------------------------- bounds
    ("bounds-inverted", _toml("[0.015, 0.038]", "[0.038, 0.015]"), None, "transition_z_m"),
    ("bounds-zero-width", _toml("[0.015, 0.038]", "[0.02, 0.02]"), None, "transition_z_m"),
    ("bounds-nan", _toml("[0.015, 0.038]", "[nan, 0.038]"), None, "transition_z_m"),
    ("bounds-unknown-parameter", _toml("transition_z_m =", "transition_place_m ="), None, "transition_place_m"),
    ("bounds-not-a-pair", _toml("[0.015, 0.038]", "[0.015]"), None, "must be [lower, upper]"),
    ("bounds-start-outside", _toml("[forward_model]", "[[shape.start]]\nlog10_inner_level = -2.5\nlog10_outer_level = -1.0\ntransition_z_m = 0.9\ntransition_width_m = 0.004\n\n[forward_model]"), None, "shape.start[1]"),
    # ------------------------------------------------------- operating points
    ("point-negative-voltage", _toml("discharge_voltage_V = 300.0", "discharge_voltage_V = -300.0"), None, "operating_points[1]"),
    ("point-zero-flow", _toml("anode_mass_flow_kg_s = 4.5e-6", "anode_mass_flow_kg_s = 0.0"), None, "anode_mass_flow_kg_s"),
    ("point-unknown-propellant", _toml('propellant = "xenon"', 'propellant = "unobtainium"'), None, "unobtainium"),
    ("point-duplicate-label", _toml('label = "250V"', 'label = "300V"'), None, "300V"),
    ("point-empty-label", _toml('label = "250V"', 'label = ""'), None, "label"),
    ("point-zero-field-scale", _toml('label = "300V"', 'label = "300V"\nmagnetic_field_scale = 0.0'), None, "magnetic_field_scale"),
    ("point-voltage-as-text", _toml("discharge_voltage_V = 300.0", 'discharge_voltage_V = "300 V"'), None, "discharge_voltage_V"),
    # ------------------------------------------------------------- programs
    ("program-missing", _toml("command = [PYTHON,", 'command = ["/nonexistent/solver-x",'), None, "not found"),
    ("program-not-executable", _toml("command = [PYTHON,", 'command = ["./lif_300.csv",'), None, "not executable"),
]


@pytest.fixture(scope="module")
def earlier_result(tmp_path_factory):
    """An output folder of another calibration holding results, and its file hashes."""
    folder = tmp_path_factory.mktemp("earlier") / "out"
    folder.mkdir()
    (folder / "run.json").write_text(json.dumps({"fingerprint": "0123456789abcdef",
                                                 "base_dir": "/elsewhere", "version": "0"}))
    (folder / "calibration.toml").write_text("# another calibration\n")
    pd.DataFrame({"trial": [0, 1], "status": ["ok", "ok"]}).to_parquet(folder / "trials.parquet")
    (folder / "summary.json").write_text('{"best_reduced_chi2": 1.02}')
    return folder, _hashes(folder)


def _hashes(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


def _refused(capsys, argv, fragment, tally):
    tally.add("bad_inputs_tried")
    code = main(argv)
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert code == 2, err
    assert len(lines) == 1 and lines[0].startswith("profshape: error: "), err
    assert "Traceback" not in err
    assert fragment.lower() in lines[0].lower(), lines[0]
    tally.add("bad_inputs_refused")
    return lines[0]


def test_base_case_is_valid(tmp_path):
    """The battery's base file is accepted, so every refusal below is due to its one change."""
    from profshape.config import load_config
    from profshape.pipeline import build_calibration

    cal = build_calibration(load_config(_write_case(tmp_path, BASE)), tmp_path / "out", progress=False)
    assert cal.problem.dim == 4


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_refused_with_a_clear_error(case, tmp_path, capsys, tally, earlier_result):
    _, edit_toml, edit_folder, fragment = case
    path = _write_case(tmp_path, edit_toml(BASE) if edit_toml else BASE)
    if edit_folder:
        edit_folder(tmp_path)
    out = tmp_path / "out"
    _refused(capsys, ["calibrate", str(path), "--out", str(out), "--quiet"], fragment, tally)
    assert not (out / "trials.parquet").exists()
    folder, hashes = earlier_result
    assert _hashes(folder) == hashes


def test_output_folder_under_a_regular_file(tmp_path, capsys, tally):
    path = _write_case(tmp_path, BASE)
    _refused(capsys, ["calibrate", str(path), "--out", str(tmp_path / "lif_300.csv" / "out"), "--quiet"],
             "not writable", tally)
    assert (tmp_path / "lif_300.csv").is_file()


def test_output_folder_in_proc(tmp_path, capsys, tally):
    path = _write_case(tmp_path, BASE)  # root cannot make folders in /proc either
    _refused(capsys, ["calibrate", str(path), "--out", "/proc/profshape-reliability-out", "--quiet"],
             "not writable", tally)


def test_output_folder_is_a_file(tmp_path, capsys, tally):
    path = _write_case(tmp_path, BASE)
    _refused(capsys, ["calibrate", str(path), "--out", str(tmp_path / "lif_250.csv"), "--quiet"],
             "not a folder", tally)


def test_output_folder_of_another_calibration_is_kept(tmp_path, capsys, tally, earlier_result):
    folder, hashes = earlier_result
    path = _write_case(tmp_path, BASE)
    _refused(capsys, ["calibrate", str(path), "--out", str(folder), "--quiet"],
             "holds another calibration", tally)
    _refused(capsys, ["resume", str(tmp_path)], "not a calibration folder", tally)
    assert _hashes(folder) == hashes


def test_output_folder_not_empty(tmp_path, capsys, tally):
    path = _write_case(tmp_path, BASE)
    _refused(capsys, ["calibrate", str(path), "--out", str(tmp_path), "--quiet"], "not empty", tally)


def test_missing_calibration_file(tmp_path, capsys, tally):
    _refused(capsys, ["calibrate", str(tmp_path / "none.toml")], "calibration file not found", tally)


@pytest.mark.parametrize("case", [CASES[7], CASES[31], CASES[44]], ids=["sigma", "bounds", "program"])
def test_real_command_line(case, tmp_path, tally):
    """The installed entry point, in its own process: exit code 2, one line, no traceback."""
    _, edit_toml, edit_folder, fragment = case
    path = _write_case(tmp_path, edit_toml(BASE) if edit_toml else BASE)
    if edit_folder:
        edit_folder(tmp_path)
    tally.add("bad_inputs_tried")
    proc = subprocess.run([sys.executable, "-m", "profshape.cli", "calibrate", str(path),
                           "--out", str(tmp_path / "out"), "--quiet"],
                          capture_output=True, text=True, timeout=120)
    lines = proc.stderr.strip().splitlines()
    assert proc.returncode == 2, proc.stderr
    assert len(lines) == 1 and lines[0].startswith("profshape: error: "), proc.stderr
    assert "Traceback" not in proc.stderr and fragment.lower() in lines[0].lower()
    tally.add("bad_inputs_refused")


def test_a_refused_start_does_not_block_the_corrected_file(tmp_path, capsys, tally):
    """After a refusal, the user fixes the file and runs again with the same --out."""
    from profshape.config import load_config
    from profshape.pipeline import open_output_folder

    bad = _write_case(tmp_path, CASES[31][1](BASE))  # inverted bounds
    out = tmp_path / "out"
    _refused(capsys, ["calibrate", str(bad), "--out", str(out), "--quiet"], "inverted", tally)
    good = _write_case(tmp_path, BASE)
    assert open_output_folder(load_config(good), out) == out
    assert (out / "calibration.toml").read_text() == good.read_text()
    # once a search has started there, another calibration is refused again
    (out / "trials.parquet.json").write_text("{}")
    bad = _write_case(tmp_path, CASES[31][1](BASE))
    _refused(capsys, ["calibrate", str(bad), "--out", str(out), "--quiet"],
             "holds another calibration", tally)
