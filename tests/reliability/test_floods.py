"""External programs that flood their outputs, leave daemons behind or link outside.

Each case runs one program through :class:`ExternalModel` and checks that what is read
and kept stays within the stated limits (``profshape.forward.external.MAX_*``), with
the peak memory of this process measured by sampling its resident set size (psutil)
while the program runs, and that every process the program started is gone afterwards.
"""

from __future__ import annotations

import json
import sys
import threading
import time
from pathlib import Path

import numpy as np
import psutil
import pytest

from profshape import OperatingPoint
from profshape.forward import external
from profshape.forward.external import ExternalModel, _tail
from reliability._faulty import GRID_M, make_problem

HERE = Path(__file__).resolve().parent
PROGRAMS = HERE / "_programs.py"
MIB = 2**20
POINT = OperatingPoint("300V", 300.0, 4.5e-6, propellant="krypton")


class PeakRSS:
    """Peak resident set size of this process while the block runs (sampled every 5 ms)."""

    def __enter__(self):
        self.proc = psutil.Process()
        self.start = self.peak = self.proc.memory_info().rss
        self._stop = threading.Event()
        self._t = threading.Thread(target=self._run, daemon=True)
        self._t.start()
        return self

    def _run(self):
        while not self._stop.wait(0.005):
            self.peak = max(self.peak, self.proc.memory_info().rss)

    def __exit__(self, *exc):
        self._stop.set()
        self._t.join()
        self.peak = max(self.peak, self.proc.memory_info().rss)

    @property
    def growth_mib(self) -> float:
        return (self.peak - self.start) / MIB


def _profile():
    family = make_problem().family
    return family.profile(family.from_unit(np.full(4, 0.5)))


def _model(tmp_path, mode, arg="", timeout_s=30.0, **kw):
    return ExternalModel([sys.executable, str(PROGRAMS), mode, "{input}", str(arg)],
                         base_dir=tmp_path / "work", timeout_s=timeout_s, grid_m=GRID_M,
                         keep_work_folders="all", kill_grace_s=0.5, **kw)


def _folder(tmp_path) -> Path:
    [folder] = list((tmp_path / "work").iterdir())
    return folder


def test_stderr_flood_is_stopped_and_bounded(tmp_path, tally):
    """A program that writes stderr without end: stopped at the limit, memory flat."""
    model = _model(tmp_path, "flood_stderr", 0)
    with PeakRSS() as rss:
        pred = model(_profile(), POINT)
    assert pred.status == "failed"
    assert "stderr over the limit of 16777216 bytes" in pred.reason, pred.reason[:300]
    size = (_folder(tmp_path) / "stderr.txt").stat().st_size
    assert size <= external.MAX_LOG_BYTES + 2 * external._TAIL_BYTES
    # one 64 KiB read buffer and an 8 KiB tail, whatever the program writes
    assert rss.growth_mib < 40, rss.growth_mib
    assert len(pred.reason) < 3000
    tally.add("floods_bounded")
    tally.figure("peak RSS growth during an endless stderr (MiB)", f"{rss.growth_mib:.1f}")


def test_stderr_tail_seeks(tmp_path, tally):
    """The tail of a 1.5 GB log (sparse) is read without reading the file."""
    path = tmp_path / "stderr.txt"
    with open(path, "wb") as fh:
        fh.truncate(1500 * MIB)
        fh.seek(0, 2)
        fh.write(b"fatal: the end\n")
    with PeakRSS() as rss:
        tail = _tail(path)
    assert tail.endswith("fatal: the end")
    assert rss.growth_mib < 10, rss.growth_mib
    tally.add("floods_bounded")
    tally.figure("peak RSS growth reading the tail of a 1.5 GB stderr (MiB)", f"{rss.growth_mib:.1f}")


def test_huge_output_json_is_refused(tmp_path, tally):
    model = _model(tmp_path, "big_json", 300)  # 300 MiB, sparse
    with PeakRSS() as rss:
        pred = model(_profile(), POINT)
    assert pred.status == "failed"
    assert f"over the limit of {external.MAX_OUTPUT_JSON_BYTES}" in pred.reason, pred.reason
    assert rss.growth_mib < 20, rss.growth_mib
    tally.add("floods_bounded")
    tally.figure("peak RSS growth with a 300 MiB output.json (MiB)", f"{rss.growth_mib:.1f}")


def test_long_reason_is_cut(tmp_path, tally):
    model = _model(tmp_path, "long_reason", 500_000)
    pred = model(_profile(), POINT)
    assert pred.ok, pred.reason[:300]
    assert len(pred.reason) < external.MAX_REASON_CHARS + 100
    assert pred.reason.endswith(f"[... cut at {external.MAX_REASON_CHARS} characters]")
    tally.add("floods_bounded")


def test_two_million_rows_are_refused(tmp_path, tally):
    model = _model(tmp_path, "many_rows", 2_000_000)
    with PeakRSS() as rss:
        pred = model(_profile(), POINT)
    assert pred.status == "failed"
    assert f"more than {external.MAX_TABLE_ROWS} rows" in pred.reason, pred.reason[:300]
    assert rss.growth_mib < 60, rss.growth_mib
    tally.add("floods_bounded")


def test_output_json_link_outside_is_refused(tmp_path, tally):
    pred = _model(tmp_path, "link_output")(_profile(), POINT)
    assert pred.status == "failed" and "outside the work folder" in pred.reason, pred.reason
    tally.add("escapes_refused")


def _assert_gone(pid: int) -> None:
    try:
        proc = psutil.Process(pid)
    except psutil.NoSuchProcess:
        return
    try:
        assert proc.status() == psutil.STATUS_ZOMBIE and proc.ppid() != 1, proc
    except psutil.NoSuchProcess:
        return


@pytest.mark.parametrize("how", ["exits", "hangs"])
def test_daemon_is_reaped(how, tmp_path, tally, no_leftover_processes):
    """A program that setsid()s and forks a daemon: the daemon dies with the run."""
    model = _model(tmp_path, "daemon", "hang" if how == "hangs" else "", timeout_s=3.0)
    t0 = time.monotonic()
    pred = model(_profile(), POINT)
    assert pred.status == ("ok" if how == "exits" else "timeout"), pred.reason
    pid = int((_folder(tmp_path) / "daemon.pid").read_text())
    _assert_gone(pid)
    # the daemon held stdout and stderr open: the run still ended promptly
    assert time.monotonic() - t0 < 20
    tally.add("daemons_reaped")


def test_input_carries_the_propellant(tmp_path):
    """input.json has the propellant's mass and charge state (issue 15, item 8)."""
    pred = _model(tmp_path, "clean")(_profile(), POINT)
    assert pred.ok, pred.reason
    spec = json.loads((_folder(tmp_path) / "input.json").read_text())
    prop = spec["propellant"]
    assert prop["name"] == "krypton" and prop["ion_charge_state"] == 1
    # krypton 83.798 u (IUPAC standard atomic weight, from memory) x CODATA atomic mass constant
    from scipy import constants

    assert prop["atom_mass_kg"] == pytest.approx(83.798 * constants.atomic_mass, rel=1e-12)
    assert prop["ion_mass_kg"] == pytest.approx(83.798 * constants.atomic_mass - constants.m_e,
                                                rel=1e-12)


def test_reason_kept_on_non_zero_exit_and_cause_first(tmp_path):
    pred = _model(tmp_path, "fail_reason")(_profile(), POINT)
    assert pred.status == "failed"
    assert pred.reason.startswith("exited with code 4; reason (output.json): mesh inverted at "
                                  "cell 12"), pred.reason
    pred = _model(tmp_path / "b", "fail")(_profile(), POINT)
    # the cause (exit code, end of stderr) comes before the command and the folder
    assert pred.reason.index("fatal: mesh inverted") < pred.reason.index("command")
