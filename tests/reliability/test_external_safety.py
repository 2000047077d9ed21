"""Safety of the external-program adapter: no shell, work folders and outputs stay inside."""

from __future__ import annotations

import json
import os
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

from profshape import OperatingPoint
from profshape.exceptions import InputDataError
from profshape.forward.external import ExternalModel
from reliability._faulty import GRID_M, make_problem

# The program records its arguments and environment, then writes outputs whose file
# name comes from the environment variable OUT_NAME (and makes a symbolic link when
# LINK_TO is set): a user string or a program output trying to leave the folder.
RECORDER = textwrap.dedent("""
    import json, os, sys
    folder = os.getcwd()
    json.dump({"argv": sys.argv[1:], "cwd": folder, "hostile": os.environ.get("HOSTILE")},
              open("argv.json", "w"))
    name = os.environ.get("OUT_NAME", "ion_velocity.csv")
    if os.environ.get("LINK_TO"):
        os.symlink(os.environ["LINK_TO"], os.path.join(folder, name))
    else:
        with open("ion_velocity.csv", "w") as fh:
            fh.write("z_m,ion_velocity_m_s\\n0.0,300.0\\n0.03,9000.0\\n0.06,15000.0\\n")
    json.dump({"status": "ok", "ion_velocity_file": name}, open("output.json", "w"))
""")

HOSTILE = ["; touch PWNED_A", "$(touch PWNED_B)", "`touch PWNED_C`", "| touch PWNED_D",
           "&& touch PWNED_E", "' \" \\ *", "{workdir}/../x", "\n touch PWNED_F"]


def _profile():
    return make_problem().family.profile(make_problem().family.from_unit(np.full(4, 0.5)))


def _model(tmp_path, env=None, extra=()):
    return ExternalModel([sys.executable, "-c", RECORDER, *extra], base_dir=tmp_path / "work",
                         timeout_s=20, grid_m=GRID_M, env=env, keep_work_folders="all")


def _outside_entries(tmp_path):
    return sorted(p.name for p in tmp_path.iterdir())


def test_command_must_be_an_argument_list(tmp_path, tally):
    for command in ("python -c 'print(1)'", b"prog {input}"):
        tally.add("escapes_refused")
        with pytest.raises(InputDataError, match="not a shell string"):
            ExternalModel(command, base_dir=tmp_path)


def test_user_strings_reach_the_program_verbatim_never_a_shell(tmp_path, tally, monkeypatch):
    monkeypatch.chdir(tmp_path)
    model = _model(tmp_path, env={"HOSTILE": "$(touch PWNED_ENV)"}, extra=HOSTILE)
    label = "../../x; rm -rf ~ $(touch PWNED_L)"
    pred = model(_profile(), OperatingPoint(label, 300.0, 4.5e-6))
    assert pred.ok, pred.reason
    [folder] = list((tmp_path / "work").iterdir())
    record = json.loads((folder / "argv.json").read_text())
    # no shell ran: every metacharacter arrived as a literal argument, nothing was created
    assert record["argv"][: len(HOSTILE) - 2] == HOSTILE[:6]
    assert record["argv"][6] == f"{folder}/../x"  # only {workdir} is substituted
    assert record["hostile"] == "$(touch PWNED_ENV)"
    assert not [p for p in tmp_path.rglob("PWNED*")]
    # the work folder of a hostile label is a direct child of the work folder
    assert folder.parent == (tmp_path / "work").resolve()
    assert "/" not in folder.name and folder.name.startswith("run-")  # one path component
    assert Path(record["cwd"]).resolve() == folder.resolve()
    assert _outside_entries(tmp_path) == ["work"]
    tally.add("escapes_refused", len(HOSTILE) + 2)


@pytest.mark.parametrize("name", ["../escaped.csv", "../../escaped.csv", "/etc/hostname",
                                  "sub/../../escaped.csv", "\x00bad.csv", ""])
def test_output_file_names_cannot_escape(name, tmp_path, tally):
    (tmp_path / "escaped.csv").write_text("z_m,ion_velocity_m_s\n0.0,1.0\n0.06,2.0\n")
    model = _model(tmp_path, env={"OUT_NAME": name} if "\x00" not in name else None)
    if "\x00" in name:  # environment strings cannot hold NUL: give it through output.json
        model = ExternalModel([sys.executable, "-c", "import json; json.dump({'ion_velocity_file': "
                               "'\\x00bad.csv'}, open('output.json', 'w'))"],
                              base_dir=tmp_path / "work", timeout_s=20, grid_m=GRID_M)
    pred = model(_profile(), OperatingPoint("300V", 300.0, 4.5e-6))
    assert pred.status == "failed"
    assert "work folder" in pred.reason or "non-empty string" in pred.reason, pred.reason
    tally.add("escapes_refused")


def test_symbolic_link_out_of_the_work_folder_is_refused(tmp_path, tally):
    outside = tmp_path / "secret.csv"
    outside.write_text("z_m,ion_velocity_m_s\n0.0,1.0\n0.06,2.0\n")
    model = _model(tmp_path, env={"OUT_NAME": "link.csv", "LINK_TO": str(outside)})
    pred = model(_profile(), OperatingPoint("300V", 300.0, 4.5e-6))
    assert pred.status == "failed" and "outside the work folder" in pred.reason
    assert outside.read_text().startswith("z_m")  # untouched
    tally.add("escapes_refused")


def test_work_folders_stay_inside_the_calibration_folder(tmp_path):
    model = _model(tmp_path)
    assert model.base_dir == (tmp_path / "work").resolve()
    for label in ("a/b", "..", "../..", "~root", "C:\\x", "x" * 300):
        pred = model(_profile(), OperatingPoint(label, 300.0, 4.5e-6))
        assert pred.ok, pred.reason
    for folder in (tmp_path / "work").iterdir():
        assert folder.parent == model.base_dir and folder.is_dir()
    assert _outside_entries(tmp_path) == ["work"]
    assert not os.path.exists(tmp_path.parent / "run-")
