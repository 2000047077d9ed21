"""Run an external program as the forward model.

Each run gets its own work folder inside ``base_dir``. The program is started
with the work folder as its current directory, from an argument list (never a
shell string). In the arguments, ``{input}`` is replaced by the path of the
input JSON file and ``{workdir}`` by the work folder; the environment variable
``PROFSHAPE_INPUT`` holds the input path too.

Inputs written into the work folder
-----------------------------------
``input.json``
    ``{"format": "profshape-external-1",
    "operating_point": {"label", "discharge_voltage_V", "anode_mass_flow_kg_s",
    "propellant", "magnetic_field_scale"},
    "profile": {"kind": "bohm" | "frequency", "family": str, "coefficients": {...},
    "file": "profile.csv"},
    "output_file": "output.json"}``
``profile.csv``
    Columns ``z_m`` (axial position from the anode [m]) and ``value`` (the
    profile there: Bohm-like coefficient [-] for kind ``"bohm"``, anomalous
    collision frequency [1/s] for kind ``"frequency"``), one row per grid node.

Outputs the program writes into the work folder
-----------------------------------------------
``output.json``
    ``{"status": "ok" | "failed" | "not_converged" (default "ok"),
    "reason": str (optional),
    "scalars": {name: value in SI units, ...} (optional; e.g.
    "discharge_current" [A], "thrust" [N]),
    "ion_velocity_file": file name (optional, default "ion_velocity.csv")}``
``ion_velocity.csv``
    Columns ``z_m`` [m] (increasing) and ``ion_velocity_m_s`` [m/s].

File names read from ``output.json`` must name files inside the work folder;
anything resolving outside it (``..``, absolute paths, symbolic links out) is
refused and the run fails.

Failures
--------
A non-zero exit code, a missing or unreadable output, or a status other than
``"ok"`` gives a failed :class:`~profshape.forward.base.Prediction` whose
reason holds the command, the exit code and the last lines of stderr. A run
longer than ``timeout_s`` has its whole process tree killed (the program runs
in its own session; the session's process group gets SIGTERM, then SIGKILL)
and gives status ``"timeout"``. Failed and timed-out runs are retried up to
``retries`` times, each in a fresh work folder.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import shutil
import signal
import subprocess
import time
import uuid
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import ForwardModelError, InputDataError
from ..operating_point import OperatingPoint
from ..profile import AnomalousProfile
from .base import STATUSES, ForwardModel, Prediction

__all__ = ["DEFAULT_GRID_M", "ExternalModel"]

#: Default profile grid: 2.5 channel lengths of 25 mm, 251 nodes [m].
DEFAULT_GRID_M = np.linspace(0.0, 0.0625, 251)

INPUT_FILE = "input.json"
PROFILE_FILE = "profile.csv"
OUTPUT_FILE = "output.json"
VELOCITY_FILE = "ion_velocity.csv"
_KEEP = ("all", "failed", "none")


def _tail(path: Path, n_chars: int = 800) -> str:
    try:
        data = path.read_bytes()[-n_chars:]
    except OSError:
        return ""
    return data.decode("utf-8", errors="replace").strip()


def _kill_tree(proc: subprocess.Popen, grace_s: float) -> None:
    """Kill the program's process group (it leads its own session)."""
    with contextlib.suppress(ProcessLookupError, PermissionError):
        os.killpg(proc.pid, signal.SIGTERM)
    try:
        proc.wait(timeout=grace_s)
    except subprocess.TimeoutExpired:
        pass
    with contextlib.suppress(ProcessLookupError, PermissionError):
        os.killpg(proc.pid, signal.SIGKILL)
    with contextlib.suppress(subprocess.TimeoutExpired):
        proc.wait(timeout=5.0)


def _inside(folder: Path, name: Any) -> Path:
    if not isinstance(name, str) or not name:
        raise ValueError(f"output file name must be a non-empty string; got {name!r}")
    path = (folder / name).resolve()
    if not path.is_relative_to(folder.resolve()):
        raise ValueError(f"output file {name!r} lies outside the work folder; refused")
    return path


class ExternalModel(ForwardModel):
    """A forward model that runs an external program once per run.

    Parameters
    ----------
    command : sequence of str
        Program and arguments, e.g. ``["/opt/code/bin/run", "{input}"]``;
        ``{input}`` and ``{workdir}`` are substituted (see the module notes).
    base_dir : path-like
        Folder under which every run's work folder is made.
    timeout_s : float, default=600.0
        Wall-time limit per attempt [s].
    retries : int, default=0
        Extra attempts after a failure or timeout (not after
        ``"not_converged"``, which is a result).
    grid_m : array_like, optional
        Axial grid [m] of ``profile.csv``; default :data:`DEFAULT_GRID_M`.
    name : str, default="external"
    version : str, default="0"
        Version of the program; part of the cache key.
    env : mapping of str to str, optional
        Extra environment variables for the program.
    keep_work_folders : {"failed", "all", "none"}, default="failed"
        Which work folders to leave behind for inspection.
    kill_grace_s : float, default=2.0
        Time between SIGTERM and SIGKILL on timeout [s].

    Raises
    ------
    InputDataError
        If ``command`` is a string or empty, or another argument is invalid.
    ForwardModelError
        If the program cannot be found.
    """

    def __init__(
        self,
        command: Sequence[str],
        base_dir: str | os.PathLike[str],
        timeout_s: float = 600.0,
        retries: int = 0,
        grid_m: np.ndarray | Sequence[float] | None = None,
        name: str = "external",
        version: str = "0",
        env: Mapping[str, str] | None = None,
        keep_work_folders: str = "failed",
        kill_grace_s: float = 2.0,
    ) -> None:
        if isinstance(command, (str, bytes)):
            raise InputDataError(
                f"ExternalModel: command must be a list of arguments, not a shell string; got "
                f"{command!r}. Write e.g. ['my_code', '--input', '{{input}}']."
            )
        command = [str(c) for c in command]
        if not command:
            raise InputDataError("ExternalModel: command is empty; give the program and its arguments.")
        exe = command[0]
        if shutil.which(exe) is None and not (os.path.isfile(exe) and os.access(exe, os.X_OK)):
            raise ForwardModelError(
                f"ExternalModel: program {exe!r} not found or not executable; give its full path."
            )
        if not (isinstance(timeout_s, (int, float)) and math.isfinite(timeout_s) and timeout_s > 0):
            raise InputDataError(f"ExternalModel: timeout_s must be > 0 [s]; got {timeout_s!r}.")
        if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
            raise InputDataError(f"ExternalModel: retries must be an integer >= 0; got {retries!r}.")
        if keep_work_folders not in _KEEP:
            raise InputDataError(
                f"ExternalModel: keep_work_folders must be one of {_KEEP}; got {keep_work_folders!r}."
            )
        grid = DEFAULT_GRID_M if grid_m is None else np.asarray(grid_m, dtype=float)
        if grid.ndim != 1 or grid.size < 2 or np.any(np.diff(grid) <= 0) or not np.all(
            np.isfinite(grid)
        ):
            raise InputDataError(
                "ExternalModel: grid_m must be a finite, strictly increasing 1-D array of at "
                "least 2 positions [m]."
            )
        self.command = tuple(command)
        self.base_dir = Path(base_dir).resolve()
        self.base_dir.mkdir(parents=True, exist_ok=True)
        self.timeout_s = float(timeout_s)
        self.retries = retries
        self.grid_m = grid
        self.name = name
        self.version = str(version)
        self.env = dict(env or {})
        self.keep_work_folders = keep_work_folders
        self.kill_grace_s = float(kill_grace_s)

    def grid(self, point: OperatingPoint) -> np.ndarray | None:
        """The profile grid [m]."""
        return self.grid_m

    def cache_key(self) -> str:
        """Program, arguments, grid, name and version."""
        grid = f"{self.grid_m[0]!r}:{self.grid_m[-1]!r}:{self.grid_m.size}"
        return f"external:{json.dumps(self.command)}:{grid}:{self.name}:{self.version}"

    # ------------------------------------------------------------------ run
    def run(self, profile: AnomalousProfile, point: OperatingPoint) -> Prediction:
        """Run the program (with retries) and read its outputs."""
        attempts = []
        result = Prediction.failure("failed", "not run")
        for attempt in range(self.retries + 1):
            result, folder = self._attempt(profile, point)
            attempts.append(f"attempt {attempt + 1}: {result.status}")
            self._tidy(folder, result.ok)
            if result.status in ("ok", "not_converged"):
                break
        if not result.ok and self.retries:
            reason = f"{result.reason} [{'; '.join(attempts)}]"
            return Prediction.failure(result.status, reason)
        return result

    def _tidy(self, folder: Path, ok: bool) -> None:
        if self.keep_work_folders == "all" or (self.keep_work_folders == "failed" and not ok):
            return
        shutil.rmtree(folder, ignore_errors=True)

    def _new_folder(self, point: OperatingPoint) -> Path:
        safe = "".join(ch if ch.isalnum() or ch in "-_." else "_" for ch in point.label)[:40]
        folder = (self.base_dir / f"run-{safe}-{uuid.uuid4().hex[:12]}").resolve()
        if not folder.is_relative_to(self.base_dir):
            raise ForwardModelError(f"work folder {folder} would lie outside {self.base_dir}")
        folder.mkdir(parents=False, exist_ok=False)
        return folder

    def _write_inputs(self, folder: Path, profile: AnomalousProfile, point: OperatingPoint
                      ) -> Path:
        values = profile(self.grid_m)
        pd.DataFrame({"z_m": self.grid_m, "value": values}).to_csv(
            folder / PROFILE_FILE, index=False, float_format="%.17g"
        )
        spec = {
            "format": "profshape-external-1",
            "operating_point": point.to_dict(),
            "profile": {
                "kind": profile.kind,
                "family": profile.family,
                "coefficients": {k: float(v) for k, v in profile.coefficients.items()},
                "file": PROFILE_FILE,
            },
            "output_file": OUTPUT_FILE,
        }
        path = folder / INPUT_FILE
        path.write_text(json.dumps(spec, indent=1), encoding="utf-8")
        return path

    def _attempt(self, profile: AnomalousProfile, point: OperatingPoint
                 ) -> tuple[Prediction, Path]:
        folder = self._new_folder(point)
        start = time.perf_counter()
        input_path = self._write_inputs(folder, profile, point)
        args = [a.replace("{input}", str(input_path)).replace("{workdir}", str(folder))
                for a in self.command]
        env = {**os.environ, **self.env, "PROFSHAPE_INPUT": str(input_path)}
        out_log, err_log = folder / "stdout.txt", folder / "stderr.txt"
        with open(out_log, "wb") as out, open(err_log, "wb") as err:
            try:
                proc = subprocess.Popen(
                    args, cwd=folder, stdout=out, stderr=err, stdin=subprocess.DEVNULL,
                    env=env, start_new_session=True,
                )
            except OSError as exc:
                return Prediction.failure("failed", f"cannot start {args[0]!r}: {exc}"), folder
            try:
                code = proc.wait(timeout=self.timeout_s)
            except subprocess.TimeoutExpired:
                _kill_tree(proc, self.kill_grace_s)
                wall = time.perf_counter() - start
                return Prediction.failure(
                    "timeout",
                    f"command {args!r} exceeded timeout_s={self.timeout_s:g} s; process tree "
                    f"killed; work folder {folder}; stderr tail: {_tail(err_log)!r}",
                    wall_time_s=wall,
                ), folder
            finally:
                # a finished leader may leave children behind: end its session too
                with contextlib.suppress(ProcessLookupError, PermissionError):
                    os.killpg(proc.pid, signal.SIGKILL)
        wall = time.perf_counter() - start
        if code != 0:
            return Prediction.failure(
                "failed",
                f"command {args!r} exited with code {code}; work folder {folder}; "
                f"stderr tail: {_tail(err_log)!r}",
                wall_time_s=wall,
            ), folder
        return self._read_outputs(folder, args, wall), folder

    def _read_outputs(self, folder: Path, args: list[str], wall: float) -> Prediction:
        def fail(msg: str) -> Prediction:
            return Prediction.failure(
                "failed", f"command {args!r}: {msg}; work folder {folder}; stderr tail: "
                f"{_tail(folder / 'stderr.txt')!r}", wall_time_s=wall,
            )

        out_path = folder / OUTPUT_FILE
        if not out_path.is_file():
            return fail(f"exit code 0 but no {OUTPUT_FILE} written")
        try:
            spec = json.loads(out_path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, ValueError) as exc:
            return fail(f"{OUTPUT_FILE} is not valid JSON ({exc})")
        if not isinstance(spec, dict):
            return fail(f"{OUTPUT_FILE} must hold a JSON object; got {type(spec).__name__}")
        status = spec.get("status", "ok")
        if status not in STATUSES:
            return fail(f"{OUTPUT_FILE}: status {status!r} not in {STATUSES}")
        if status != "ok":
            return Prediction.failure(status, str(spec.get("reason", status)), wall_time_s=wall)
        scalars = spec.get("scalars", {})
        if not isinstance(scalars, dict):
            return fail(f"{OUTPUT_FILE}: 'scalars' must be an object of numbers")
        z = v = None
        name = spec.get("ion_velocity_file", VELOCITY_FILE)
        try:
            vel_path = _inside(folder, name)
        except ValueError as exc:
            return fail(str(exc))
        if vel_path.is_file():
            try:
                table = pd.read_csv(vel_path)
                z = pd.to_numeric(table["z_m"], errors="raise").to_numpy(dtype=float)
                v = pd.to_numeric(table["ion_velocity_m_s"], errors="raise").to_numpy(dtype=float)
            except (OSError, ValueError, KeyError, pd.errors.ParserError) as exc:
                return fail(
                    f"{vel_path.name} unreadable: need columns z_m, ion_velocity_m_s ({exc!r})"
                )
        elif "ion_velocity_file" in spec:
            return fail(f"{name!r} named in {OUTPUT_FILE} does not exist")
        return Prediction(status="ok", z_m=z, ion_velocity_m_s=v, scalars=scalars,
                          reason=str(spec.get("reason", "")), wall_time_s=wall)
