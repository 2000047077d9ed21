"""ExternalModel with the example program: success, failures, timeout, path safety."""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from scipy import constants

from profshape import OperatingPoint
from profshape.exceptions import ForwardModelError, InputDataError
from profshape.forward.external import ExternalModel
from profshape.profile import AnomalousProfile

EXAMPLE = str(Path(__file__).with_name("example_code.py"))
POINT = OperatingPoint("300V", 300.0, 4.5e-6)


def _profile(z):
    return 0.002 + 0.06 / (1 + np.exp(-(z - 0.024) / 0.002))


PROFILE = AnomalousProfile("bohm", _profile, {"a": 1.0}, "test")


def _model(tmp_path, mode="ok", **kw):
    return ExternalModel([sys.executable, EXAMPLE, "{input}", "--mode", mode],
                         base_dir=tmp_path / "runs", **kw)


def test_success_reads_velocity_and_scalars(tmp_path):
    m = _model(tmp_path)
    p = m(PROFILE, POINT)
    assert p.ok, p.reason
    assert p.z_m.size == 251
    # energy conservation bound sqrt(2 e V / M) (REFERENCES.md: 20,998 m/s at 300 V for Xe)
    ion_mass = 131.293 * constants.atomic_mass - constants.m_e  # IUPAC weight, CODATA 2018
    vmax = np.sqrt(2 * constants.e * 300.0 / ion_mass)
    assert vmax == pytest.approx(20998, rel=1e-3)
    assert p.ion_velocity_m_s.max() == pytest.approx(np.sqrt(0.9) * vmax + 300.0, rel=1e-6)
    assert p.scalars["discharge_current"] > 0
    assert not any((tmp_path / "runs").iterdir())  # successful folders are removed


def test_nonzero_exit_records_code_and_stderr(tmp_path):
    p = _model(tmp_path, "exit")(PROFILE, POINT)
    assert p.status == "failed"
    assert "exited with code 3" in p.reason and "cannot mesh the channel" in p.reason


def test_timeout_kills_the_process_tree(tmp_path):
    m = _model(tmp_path, "sleep", timeout_s=3.0, kill_grace_s=0.5)
    t0 = time.perf_counter()
    p = m(PROFILE, POINT)
    assert p.status == "timeout" and "timeout_s=3" in p.reason
    assert time.perf_counter() - t0 < 20
    pid_files = list((tmp_path / "runs").glob("*/child.pid"))
    assert len(pid_files) == 1
    pid = int(pid_files[0].read_text())
    time.sleep(0.3)
    status = Path(f"/proc/{pid}/status")
    alive = status.exists() and "zombie" not in status.read_text().lower()
    assert not alive, "the child of the timed-out program is still running"


def test_garbage_and_escaping_outputs_fail_cleanly(tmp_path):
    p = _model(tmp_path, "garbage")(PROFILE, POINT)
    assert p.status == "failed" and "not valid JSON" in p.reason
    p = _model(tmp_path, "escape")(PROFILE, POINT)
    assert p.status == "failed" and "outside the work folder" in p.reason
    p = _model(tmp_path, "not_converged")(PROFILE, POINT)
    assert p.status == "not_converged" and "residual" in p.reason


def test_retries_and_bad_arguments(tmp_path):
    p = _model(tmp_path, "exit", retries=2)(PROFILE, POINT)
    assert p.status == "failed" and "attempt 3: failed" in p.reason
    assert len(list((tmp_path / "runs").iterdir())) == 3  # failed folders kept
    with pytest.raises(InputDataError, match="not a shell string"):
        ExternalModel(f"{sys.executable} {EXAMPLE}", base_dir=tmp_path)
    with pytest.raises(ForwardModelError, match="not found"):
        ExternalModel(["/nonexistent/program"], base_dir=tmp_path)
    with pytest.raises(InputDataError, match="timeout_s"):
        ExternalModel([sys.executable], base_dir=tmp_path, timeout_s=0)
    assert os.path.isdir(tmp_path / "runs")
