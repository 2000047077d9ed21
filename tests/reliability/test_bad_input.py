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
options = { channel_length_m = 0.024 }

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
    from profshape.workflow import build_calibration

    cal = build_calibration(load_config(_write_case(tmp_path, BASE)), tmp_path / "out", progress=False)
    assert cal.problem.dim == 4


def test_background_pressure_from_the_file(tmp_path, capsys):
    """Facility pressure and temperature reach the operating point; a negative one is refused."""
    from profshape.config import load_config
    from profshape.workflow import build_calibration

    text = BASE.replace('label = "250V"\n', 'label = "250V"\nbackground_pressure_Pa = 2e-3\n'
                        'background_temperature_K = 290.0\n')
    cal = build_calibration(load_config(_write_case(tmp_path, text)), tmp_path / "out", progress=False)
    point = cal.problem.dataset["250V"].point
    assert (point.background_pressure_Pa, point.background_temperature_K) == (2e-3, 290.0)
    assert cal.problem.dataset["300V"].point.background_pressure_Pa == 0.0
    bad = BASE.replace('label = "250V"\n', 'label = "250V"\nbackground_pressure_Pa = -1e-3\n')
    path = _write_case(tmp_path, bad)
    assert main(["calibrate", str(path), "--out", str(tmp_path / "out2")]) == 2
    err = capsys.readouterr().err
    assert "operating_points[2]" in err and "background_pressure_Pa" in err


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
    from profshape.workflow import open_output_folder

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


# ------------------------------------------------------------------ round two
_POSTERIOR_ON = "enabled = true\nn_steps = 100\nburn_in = 20\n"
CASES_TWO = [
    ("size-grid-points", _toml("timeout_s = 10", "timeout_s = 10\ngrid_points = 3000000000"), None, "forward_model.grid_points"),
    ("size-budget", _toml("budget = 4", "budget = 10000000"), None, "search.budget"),
    ("size-workers", _toml("[posterior]", "[workers]\nn_workers = 100000\n\n[posterior]"), None, "workers.n_workers"),
    ("size-solver-cells", lambda t: _toml('kind = "external"', 'kind = "builtin"\nsolver.n_cells = 2000000')(t).replace("[shape]\n", '[device]\npreset = "demo"\n\n[shape]\n', 1), None, "n_cells"),
    ("weight-as-text", _toml("[search]", '[likelihood]\nweights = { ion_velocity = "heavy" }\n\n[search]'), None, "likelihood.weights.ion_velocity"),
    ("fit-discrepancy-three", _toml("[search]", "[likelihood]\nfit_discrepancy_m_s = [10.0, 100.0, 1000.0]\n\n[search]"), None, "likelihood.fit_discrepancy_m_s"),
    ("start-as-string", _toml("[forward_model]", '[[shape.start]]\nlog10_inner_level = "low"\n\n[forward_model]'), None, "shape.start[1].log10_inner_level"),
    ("start-table-as-string", _toml('family = "smooth_step"', 'family = "smooth_step"\nstart = "my hand-tuned one"'), None, "shape.start"),
    ("seed-huge", _toml("seed = 0", "seed = 100000000000000000000"), None, "search.seed"),
    ("reference-garbage", _toml('family = "smooth_step"\noptions = { channel_length_m = 0.024 }', 'family = "scaled_reference"\noptions = { reference_file = "ref.csv" }'), lambda f: (f / "ref.csv").write_bytes(bytes(range(256)) * 8), "reference_file"),
    ("figures-unknown", _toml("[posterior]", '[output]\nfigures = ["exe"]\n\n[posterior]'), None, "output.figures[1]"),
    ("posterior-zero-walkers", _toml("enabled = false", _POSTERIOR_ON + "n_walkers = 0"), None, "posterior.n_walkers"),
    ("posterior-few-walkers", _toml("enabled = false", _POSTERIOR_ON + "n_walkers = 4"), None, "2 * d = 8"),
    ("posterior-burn-in", _toml("enabled = false", "enabled = true\nn_steps = 100\nburn_in = 200"), None, "posterior.burn_in"),
    ("scalar-typo", _toml('ion_velocity_file = "lif_300.csv"', 'ion_velocity_file = "lif_300.csv"\nscalars.dischrge_current = { value = 0.3, sigma = 0.01 }'), None, "did you mean 'discharge_current'"),
    ("key-typo-suggestion", _toml("[search]", "[search]\nbugdet = 3"), None, "did you mean 'budget'"),
    ("table-typo-suggestion", _toml("[search]", "[serach]\nbudget = 3\n\n[search]"), None, "did you mean 'search'"),
    ("grid-range-inverted", _toml("timeout_s = 10", "timeout_s = 10\ngrid_z_m = [0.06, 0.0]"), None, "forward_model.grid_z_m"),
    ("stop-after-negative", _toml("seed = 0", "seed = 0\nstop_after_failures = -1"), None, "stop_after_failures"),
]


@pytest.mark.parametrize("case", CASES_TWO, ids=[c[0] for c in CASES_TWO])
def test_refused_at_the_door(case, tmp_path, capsys, tally):
    """Round two: sizes, values and posterior settings refused before any forward run."""
    _, edit_toml, edit_folder, fragment = case
    path = _write_case(tmp_path, edit_toml(BASE) if edit_toml else BASE)
    if edit_folder:
        edit_folder(tmp_path)
    out = tmp_path / "out"
    _refused(capsys, ["calibrate", str(path), "--out", str(out), "--quiet"], fragment, tally)
    assert not (out / "trials.parquet").exists()
    assert not (out / "work").exists() or not any((out / "work").iterdir())  # no forward run


@pytest.fixture(scope="module")
def finished_folder(tmp_path_factory):
    """A small finished calibration folder to damage (a copy per test)."""
    folder = tmp_path_factory.mktemp("finished")
    path = _write_case(folder, BASE)
    assert main(["calibrate", str(path), "--out", str(folder / "out"), "--quiet"]) == 0
    return folder


def _damaged(finished_folder, tmp_path, damage):
    import shutil

    case = tmp_path / "case"
    shutil.copytree(finished_folder, case)
    out = case / "out"
    info = json.loads((out / "run.json").read_text())
    info["base_dir"] = str(case)
    (out / "run.json").write_text(json.dumps(info))
    damage(out)
    return out


def _truncate(name, keep=0.5):
    def damage(out):
        data = (out / name).read_bytes()
        (out / name).write_bytes(data[: int(len(data) * keep)])
    return damage


def _other_version(out):
    side = json.loads((out / "trials.parquet.json").read_text())
    side["version"] = "0.0.1"
    del side["state"]
    (out / "trials.parquet.json").write_text(json.dumps(side))


@pytest.mark.parametrize("damage, fragment", [
    (_truncate("trials.parquet"), "trials.parquet"),
    (_truncate("trials.parquet.json", 0.0), "trials.parquet.json"),
    (_truncate("run.json", 0.6), "run.json"),
    (_other_version, "trials.parquet.json"),
], ids=["truncated-log", "empty-sidecar", "broken-run-json", "other-version-sidecar"])
def test_damaged_folder_on_resume(damage, fragment, finished_folder, tmp_path, capsys, tally):
    out = _damaged(finished_folder, tmp_path, damage)
    message = _refused(capsys, ["resume", str(out), "--quiet"], fragment, tally)
    assert "Traceback" not in message


def test_bom_in_calibration_file_is_accepted(tmp_path):
    from profshape.config import load_config

    path = _write_case(tmp_path, BASE)
    path.write_bytes(b"\xef\xbb\xbf" + path.read_bytes())
    assert load_config(path).data["title"] == "reliability bad-input base"


def test_both_csv_and_parquet_are_ambiguous(tmp_path, capsys, tally):
    from profshape.demo import demo_data_folder

    data = tmp_path / "data"
    data.mkdir()
    for f in demo_data_folder().glob("*.csv"):
        (data / f.name).write_bytes(f.read_bytes())
    pd.read_csv(data / "ion_velocity.csv").to_parquet(data / "ion_velocity.parquet")
    text = BASE.split("[[operating_points]]")[0] + 'data_folder = "data"\n\n[shape]' + BASE.split("[shape]")[1]
    path = _write_case(tmp_path, text)
    _refused(capsys, ["calibrate", str(path), "--out", str(tmp_path / "out"), "--quiet"],
             "both ion_velocity.csv and ion_velocity.parquet are present", tally)


def test_misspelt_table_name_gets_a_suggestion(tmp_path, capsys, tally):
    from profshape.demo import demo_data_folder

    data = tmp_path / "data"
    data.mkdir()
    for f in demo_data_folder().glob("*.csv"):
        (data / f.name.replace("ion_velocity", "ion_velocty")).write_bytes(f.read_bytes())
    text = BASE.split("[[operating_points]]")[0] + 'data_folder = "data"\n\n[shape]' + BASE.split("[shape]")[1]
    path = _write_case(tmp_path, text)
    _refused(capsys, ["calibrate", str(path), "--out", str(tmp_path / "out"), "--quiet"],
             "there is 'ion_velocty' (did you mean 'ion_velocity'?)", tally)


def test_implausible_values_are_warned(tmp_path):
    from profshape.config import load_config
    from profshape.exceptions import ImplausibleValueWarning
    from profshape.workflow import build_calibration

    text = BASE.replace("discharge_voltage_V = 250.0", "discharge_voltage_V = 1e30").replace(
        'ion_velocity_file = "lif_300.csv"',
        'ion_velocity_file = "lif_300.csv"\nscalars.thrust = { value = 91.3, sigma = 1.8 }')
    path = _write_case(tmp_path, text)
    df = _lif(300.0)
    df.loc[3, "sigma_ion_velocity_m_s"] = 1e300
    df.to_csv(tmp_path / "lif_300.csv", index=False)
    with pytest.warns(ImplausibleValueWarning) as record:
        build_calibration(load_config(path), tmp_path / "out", progress=False)
    text = " | ".join(str(w.message) for w in record)
    assert "discharge_voltage_V = 1e+30 is outside the plausible range" in text
    assert "sigma_ion_velocity_m_s up to 1e+300" in text
    assert "scalar thrust = 91.3 is outside the plausible range [1e-06, 10]" in text


def test_propellant_fallback_is_warned(tmp_path):
    from profshape.config import load_config
    from profshape.exceptions import ProfshapeWarning
    from profshape.workflow import build_calibration

    path = _write_case(tmp_path, BASE.replace('propellant = "xenon"\n', "", 1))
    with pytest.warns(ProfshapeWarning, match=r"operating_points\[1\] gives no propellant; using xenon"):
        build_calibration(load_config(path), tmp_path / "out", progress=False)


def test_profile_grid_without_a_device(tmp_path):
    """grid_z_m and grid_points set the external program's grid; grid_points is never ignored."""
    from profshape.config import load_config
    from profshape.workflow import build_calibration

    path = _write_case(tmp_path, BASE.replace("timeout_s = 10", "timeout_s = 10\ngrid_points = 51")
                       .replace("options = { channel_length_m = 0.024 }\n", ""))
    with pytest.warns(UserWarning, match=r"assume a channel length of 0.025 m"):
        build_calibration(load_config(path), tmp_path / "c", progress=False)
    grid = build_calibration(load_config(path), tmp_path / "a", progress=False).problem.forward_model.grid(None)
    assert grid.size == 51 and grid[0] == 0.0 and grid[-1] == pytest.approx(0.0625)
    path = _write_case(tmp_path, BASE.replace(
        "timeout_s = 10", "timeout_s = 10\ngrid_points = 101\ngrid_z_m = [0.0, 0.07]"))
    grid = build_calibration(load_config(path), tmp_path / "b", progress=False).problem.forward_model.grid(None)
    assert grid.size == 101 and grid[-1] == pytest.approx(0.07)


def test_accepted_figure_formats_are_written_by_matplotlib():
    """Every format the door accepts is one matplotlib can write (its own list as reference)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from profshape.config import FIGURE_FORMATS

    supported = FigureCanvasAgg(Figure()).get_supported_filetypes()
    assert set(FIGURE_FORMATS) <= set(supported), set(FIGURE_FORMATS) - set(supported)
