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
    "propellant", "magnetic_field_scale", "background_pressure_Pa",
    "background_temperature_K"},
    "propellant": {"name", "symbol", "atom_mass_kg", "ion_mass_kg",
    "ion_charge_state" (1: singly charged ions), "ionization_energy_eV"},
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
    Columns ``z_m`` [m] (increasing) and ``ion_velocity_m_s`` [m/s]; optionally
    other profile observables on the same positions: ``potential_V`` (plasma
    potential [V]), ``electron_temperature_eV`` [eV] and ``plasma_density_m3``
    [m^-3] (see :data:`profshape.observables.FIELD_OF_PROFILE`). Other columns
    are ignored.

File names read from ``output.json`` (and ``output.json`` itself) must name
files inside the work folder; anything resolving outside it (``..``, absolute
paths, symbolic links out) is refused and the run fails.

Limits
------
What is read from a program, and kept of it, is bounded: stdout and stderr
are each kept up to :data:`MAX_LOG_BYTES` on disk (``stdout.txt``,
``stderr.txt``, plus their last 8 KiB); ``output.json`` may hold
:data:`MAX_OUTPUT_JSON_BYTES`, the velocity table :data:`MAX_TABLE_BYTES`
and :data:`MAX_TABLE_ROWS` rows, and a ``reason`` is cut to
:data:`MAX_REASON_CHARS` characters. A program over a log limit is stopped;
any run over a limit fails with a reason that names it.

Failures
--------
A non-zero exit code, a missing or unreadable output, or a status other than
``"ok"`` gives a failed :class:`~profshape.forward.base.Prediction` whose
reason holds the cause first (the exit code, the ``reason`` of an
``output.json`` if the program wrote one, the last lines of stderr), then the
command and the work folder. Each program runs under a small launcher
(:mod:`profshape.forward._reaper`) in its own session: the launcher is a
child subreaper (Linux), so every process the program starts, even a daemon
that called ``setsid()``, is killed and reaped when the run ends. A run
longer than ``timeout_s`` gets SIGTERM, then SIGKILL after ``kill_grace_s``,
on its whole tree, and status ``"timeout"``. Failed and timed-out runs are
retried up to ``retries`` times, each in a fresh work folder.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import shutil
import signal
import subprocess
import sys
import threading
import time
import uuid
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..exceptions import ForwardModelError, InputDataError, ModelOutputError
from ..observables import FIELD_OF_PROFILE
from ..operating_point import OperatingPoint
from ..profile import AnomalousProfile
from .base import STATUSES, ForwardModel, Prediction

__all__ = [
    "DEFAULT_GRID_M",
    "MAX_LOG_BYTES",
    "MAX_OUTPUT_JSON_BYTES",
    "MAX_REASON_CHARS",
    "MAX_TABLE_BYTES",
    "MAX_TABLE_ROWS",
    "ExternalModel",
]

#: Default profile grid: 2.5 channel lengths of 25 mm, 251 nodes [m].
DEFAULT_GRID_M = np.linspace(0.0, 0.0625, 251)

INPUT_FILE = "input.json"
PROFILE_FILE = "profile.csv"
OUTPUT_FILE = "output.json"
VELOCITY_FILE = "ion_velocity.csv"
_KEEP = ("all", "failed", "none")
_REAPER = Path(__file__).with_name("_reaper.py")

#: Bytes of stdout, and of stderr, kept on disk per run; a program writing more is stopped.
MAX_LOG_BYTES = 16 * 2**20
#: Largest ``output.json`` read [bytes].
MAX_OUTPUT_JSON_BYTES = 2**20
#: Largest velocity table read [bytes].
MAX_TABLE_BYTES = 64 * 2**20
#: Most rows of a velocity table.
MAX_TABLE_ROWS = 100_000
#: Longest ``reason`` kept from ``output.json`` [characters].
MAX_REASON_CHARS = 2000
_TAIL_BYTES = 8192


def _tail(path: Path, n_chars: int = 800) -> str:
    """The last ``n_chars`` bytes of a file (seeks; never reads the whole file)."""
    try:
        with open(path, "rb") as fh:
            fh.seek(0, os.SEEK_END)
            fh.seek(max(fh.tell() - n_chars, 0))
            data = fh.read(n_chars)
    except OSError:
        return ""
    return data.decode("utf-8", errors="replace").strip()


class _CappedSink:
    """Drains a pipe into a file, keeping at most ``limit`` bytes and the last 8 KiB.

    Memory use is one 64 KiB chunk and the tail, whatever the program writes.
    """

    def __init__(self, pipe: Any, path: Path, limit: int, on_over: Any):
        self.pipe, self.path, self.limit, self.on_over = pipe, path, int(limit), on_over
        self.total = 0
        self.tail = bytearray()
        self.thread = threading.Thread(target=self._run, name="profshape-pipe", daemon=True)
        self.thread.start()

    @property
    def over(self) -> bool:
        return self.total > self.limit

    def _run(self) -> None:
        with open(self.path, "wb") as out:
            while True:
                try:
                    chunk = self.pipe.read1(65536)
                except (OSError, ValueError):
                    break
                if not chunk:
                    break
                room = self.limit - self.total
                if room > 0:
                    out.write(chunk[:room])
                was_over = self.over
                self.total += len(chunk)
                self.tail += chunk
                del self.tail[:-_TAIL_BYTES]
                if self.over and not was_over:
                    self.on_over()
            if self.over:
                out.write(f"\n[profshape: {self.total - self.limit} bytes not kept: over the "
                          f"limit of {self.limit} bytes; the last {len(self.tail)} bytes "
                          "follow]\n".encode())
                out.write(bytes(self.tail))
        with contextlib.suppress(OSError):
            self.pipe.close()

    def text(self, n_chars: int = 800) -> str:
        return bytes(self.tail[-n_chars:]).decode("utf-8", errors="replace").strip()


def _inside(folder: Path, name: Any) -> Path:
    if not isinstance(name, str) or not name:
        raise ModelOutputError(f"output file name must be a non-empty string; got {name!r}")
    path = (folder / name).resolve()
    if not path.is_relative_to(folder.resolve()):
        raise ModelOutputError(f"output file {name!r} lies outside the work folder; refused")
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
    max_log_bytes, max_output_json_bytes, max_table_bytes, max_table_rows, max_reason_chars : int
        Limits on what is read and kept (see the module notes; defaults
        :data:`MAX_LOG_BYTES` and the others).

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
        max_log_bytes: int = MAX_LOG_BYTES,
        max_output_json_bytes: int = MAX_OUTPUT_JSON_BYTES,
        max_table_bytes: int = MAX_TABLE_BYTES,
        max_table_rows: int = MAX_TABLE_ROWS,
        max_reason_chars: int = MAX_REASON_CHARS,
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
        for key, value in (("max_log_bytes", max_log_bytes),
                           ("max_output_json_bytes", max_output_json_bytes),
                           ("max_table_bytes", max_table_bytes),
                           ("max_table_rows", max_table_rows),
                           ("max_reason_chars", max_reason_chars)):
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise InputDataError(f"ExternalModel: {key} must be an integer >= 1; got {value!r}.")
        self.max_log_bytes: int = max_log_bytes
        self.max_output_json_bytes: int = max_output_json_bytes
        self.max_table_bytes: int = max_table_bytes
        self.max_table_rows: int = max_table_rows
        self.max_reason_chars: int = max_reason_chars

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
        prop = point.propellant_data
        spec = {
            "format": "profshape-external-1",
            "operating_point": point.to_dict(),
            "propellant": {"name": prop.name, "symbol": prop.symbol,
                           "atom_mass_kg": prop.mass_kg, "ion_mass_kg": prop.ion_mass_kg,
                           "ion_charge_state": 1,
                           "ionization_energy_eV": prop.ionization_energy_eV},
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
        launcher = [sys.executable, "-I", str(_REAPER), repr(self.kill_grace_s), "--", *args]
        try:
            proc = subprocess.Popen(
                launcher, cwd=folder, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                stdin=subprocess.DEVNULL, env=env, start_new_session=True,
            )
        except OSError as exc:
            return Prediction.failure("failed", f"cannot start {args[0]!r}: {exc}"), folder

        def stop() -> None:  # a log flood: end the run now
            with contextlib.suppress(ProcessLookupError, PermissionError):
                os.kill(proc.pid, signal.SIGTERM)

        sinks = {name: _CappedSink(pipe, folder / f"{name}.txt", self.max_log_bytes, stop)
                 for name, pipe in (("stdout", proc.stdout), ("stderr", proc.stderr))}
        timed_out = False
        try:
            code = proc.wait(timeout=self.timeout_s)
        except subprocess.TimeoutExpired:
            timed_out = True
            stop()  # the launcher ends the whole tree: SIGTERM, grace, SIGKILL, reap
            try:
                code = proc.wait(timeout=self.kill_grace_s + 10.0)
            except subprocess.TimeoutExpired:
                code = None
        finally:
            # the launcher reaps what the program started; its session goes too
            with contextlib.suppress(ProcessLookupError, PermissionError):
                os.killpg(proc.pid, signal.SIGKILL)
            with contextlib.suppress(subprocess.TimeoutExpired):
                proc.wait(timeout=5.0)
        for sink in sinks.values():
            sink.thread.join(timeout=5.0)
        wall = time.perf_counter() - start
        tail = sinks["stderr"].text()
        where = f"command {args!r}; work folder {folder}"
        over = [n for n, sink in sinks.items() if sink.over]
        if over:
            name = over[0]
            return Prediction.failure(
                "failed",
                f"{name} over the limit of {self.max_log_bytes} bytes (the program wrote at "
                f"least {sinks[name].total} bytes and was stopped; {name}.txt keeps the first "
                f"{self.max_log_bytes} and the last {_TAIL_BYTES}); stderr tail: {tail!r}; {where}",
                wall_time_s=wall,
            ), folder
        if timed_out:
            return Prediction.failure(
                "timeout",
                f"exceeded timeout_s={self.timeout_s:g} s; process tree killed; stderr tail: "
                f"{tail!r}; {where}",
                wall_time_s=wall,
            ), folder
        if code != 0:
            said = self._reason_of_failed(folder)
            return Prediction.failure(
                "failed",
                f"exited with code {code}" + (f"; reason (output.json): {said}" if said else "")
                + f"; stderr tail: {tail!r}; {where}",
                wall_time_s=wall,
            ), folder
        return self._read_outputs(folder, args, wall, tail), folder

    def _read_json(self, folder: Path) -> Any:
        """The parsed ``output.json``; raises ModelOutputError (with the cause) when unusable."""
        path = _inside(folder, OUTPUT_FILE)  # a symbolic link out of the folder is refused
        if not path.is_file():
            raise FileNotFoundError(OUTPUT_FILE)
        size = path.stat().st_size
        if size > self.max_output_json_bytes:
            raise ModelOutputError(f"{OUTPUT_FILE} has {size} bytes, over the limit of "
                             f"{self.max_output_json_bytes}")
        with open(path, "rb") as fh:
            data = fh.read(self.max_output_json_bytes + 1)
        try:
            return json.loads(data.decode("utf-8"))
        except (UnicodeDecodeError, ValueError) as exc:
            raise ModelOutputError(f"{OUTPUT_FILE} is not valid JSON ({exc})") from None

    def _reason(self, spec: Mapping[str, Any], default: str = "") -> str:
        text = str(spec.get("reason", default))
        if len(text) > self.max_reason_chars:
            text = text[: self.max_reason_chars] + f" [... cut at {self.max_reason_chars} characters]"
        return text

    def _reason_of_failed(self, folder: Path) -> str:
        """The ``reason`` a program that exited non-zero left in ``output.json``, if any."""
        try:
            spec = self._read_json(folder)
        except (OSError, ValueError):
            return ""
        return self._reason(spec) if isinstance(spec, dict) else ""

    def _read_outputs(self, folder: Path, args: list[str], wall: float, tail: str = ""
                      ) -> Prediction:
        def fail(msg: str) -> Prediction:
            return Prediction.failure(
                "failed", f"{msg}; stderr tail: {tail!r}; command {args!r}; work folder {folder}",
                wall_time_s=wall,
            )

        try:
            spec = self._read_json(folder)
        except FileNotFoundError:
            return fail(f"exit code 0 but no {OUTPUT_FILE} written")
        except (OSError, ValueError) as exc:
            return fail(str(exc))
        if not isinstance(spec, dict):
            return fail(f"{OUTPUT_FILE} must hold a JSON object; got {type(spec).__name__}")
        status = spec.get("status", "ok")
        if status not in STATUSES:
            return fail(f"{OUTPUT_FILE}: status {status!r} not in {STATUSES}")
        if status != "ok":
            return Prediction.failure(status, self._reason(spec, status), wall_time_s=wall)
        scalars = spec.get("scalars", {})
        if not isinstance(scalars, dict):
            return fail(f"{OUTPUT_FILE}: 'scalars' must be an object of numbers")
        if len(scalars) > 1000:
            return fail(f"{OUTPUT_FILE}: {len(scalars)} scalars, over the limit of 1000")
        z = v = None
        profiles: dict[str, np.ndarray] = {}
        name = spec.get("ion_velocity_file", VELOCITY_FILE)
        try:
            vel_path = _inside(folder, name)
        except ValueError as exc:
            return fail(str(exc))
        if vel_path.is_file():
            size = vel_path.stat().st_size
            if size > self.max_table_bytes:
                return fail(f"{vel_path.name} has {size} bytes, over the limit of "
                            f"{self.max_table_bytes}")
            try:
                table = pd.read_csv(vel_path, nrows=self.max_table_rows + 1)
                if len(table) > self.max_table_rows:
                    return fail(f"{vel_path.name} has more than {self.max_table_rows} rows, over "
                                "the limit")
                z = pd.to_numeric(table["z_m"], errors="raise").to_numpy(dtype=float)
                v = pd.to_numeric(table["ion_velocity_m_s"], errors="raise").to_numpy(dtype=float)
                profiles = {obs: pd.to_numeric(table[col], errors="raise").to_numpy(dtype=float)
                            for obs, col in FIELD_OF_PROFILE.items() if col in table.columns}
            except (OSError, ValueError, KeyError, pd.errors.ParserError) as exc:
                return fail(
                    f"{vel_path.name} unreadable: need columns z_m, ion_velocity_m_s ({exc!r})"
                )
        elif "ion_velocity_file" in spec:
            return fail(f"{name!r} named in {OUTPUT_FILE} does not exist")
        return Prediction(status="ok", z_m=z, ion_velocity_m_s=v, scalars=scalars,
                          reason=self._reason(spec), wall_time_s=wall, profiles=profiles)
