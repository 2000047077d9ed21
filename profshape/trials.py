"""The trial log: one parquet table per search, one row per finished trial.

Every finished trial is first appended as one JSON line to a journal beside
the table (``<log name>.journal``, flushed and ``fsync``-ed: one small write
per trial). The journal is compacted into the parquet table, rewritten
through a temporary file in the same folder, ``fsync`` and
:func:`os.replace`, after the first trial, every :data:`COMPACT_EVERY` trials
or :data:`COMPACT_INTERVAL_S` seconds, and when the search ends or is
interrupted; so an interrupted write never damages what was there, and
:func:`pandas.read_parquet` can read the table at any moment (it may lag the
journal by a few trials while the search runs). :func:`read_trials` reads
both: the table, then the journal's rows on top (a later row of a trial
replaces an earlier one; a line cut by a kill at the end is ignored).

A JSON sidecar (``<log name>.json``) beside it holds the search settings, the
search counters and the trials in flight, written atomically;
:func:`~profshape.search.run_search` uses it to resume.

Columns
-------
trial : int
    Trial index, 0-based, in proposal order.
batch : int
    Index of the proposal round that made the trial.
source : str
    ``"initial"`` (Sobol design), ``"proposal"`` (expected improvement),
    ``"user"`` (a user starting shape) or ``"resumed"`` (re-run after an
    interruption).
status : str
    ``"ok"``, ``"failed"``, ``"timeout"`` or ``"not_converged"``.
reduced_chi2, chi2, log_likelihood : float
    Misfit of the trial; NaN when it failed.
n_data : int
    Number of measured values compared.
misfit__<label> : float
    Chi-square of operating point ``label``; NaN when failed.
misfit__<label>__<observable> : float
    Chi-square of one observable at one point.
<parameter name> : float
    One column per searched parameter, named as ``problem.names``, in
    physical units.
u__<parameter name> : float
    The same point in the unit cube of the search.
wall_time_s : float
    Wall time of the trial [s] (all its operating points).
started_at, finished_at : datetime64 (UTC)
    When the trial was submitted and when its last point finished.
error : str
    Why the trial failed (empty when ok).
seed : int
    Seed of the search.
version : str
    ``profshape.__version__`` that ran the trial.
predictions : str
    JSON ``{label: {"status", "z_m": [...], "ion_velocity_m_s": [...],
    "scalars": {...}, "reason"}}`` so a fit can be re-plotted without
    re-running.
"""

from __future__ import annotations

import json
import math
import os
import re
import time
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ._version import __version__
from .atomic_write import atomic_write_bytes
from .exceptions import InputDataError

__all__ = [
    "BASE_COLUMNS",
    "COMPACT_EVERY",
    "COMPACT_INTERVAL_S",
    "TrialLog",
    "atomic_write_bytes",
    "journal_path",
    "read_predictions",
    "read_trials",
    "reason_signature",
    "sidecar_path",
    "trial_row",
]

#: Journal rows after which the parquet table is rewritten.
COMPACT_EVERY = 16
#: Seconds after which the parquet table is rewritten at the next trial [s].
COMPACT_INTERVAL_S = 30.0

BASE_COLUMNS = (
    "trial", "batch", "source", "status", "reduced_chi2", "chi2", "n_data", "log_likelihood",
)
TAIL_COLUMNS = (
    "wall_time_s", "started_at", "finished_at", "error", "seed", "version", "predictions",
)


def sidecar_path(log_path: str | os.PathLike[str]) -> Path:
    """Path of the JSON sidecar of a trial log (``<log name>.json``)."""
    p = Path(log_path)
    return p.with_name(p.name + ".json")


def journal_path(log_path: str | os.PathLike[str]) -> Path:
    """Path of the append-only journal of a trial log (``<log name>.journal``)."""
    p = Path(log_path)
    return p.with_name(p.name + ".journal")


_SIGNATURE_SUBS = (
    (re.compile(r"work folder \S+"), "work folder *"),
    (re.compile(r"\S*run-[^\s'\"/]*-[0-9a-f]{12}\S*"), "*"),
    (re.compile(r"0x[0-9a-fA-F]+"), "0x*"),
    (re.compile(r"\b[0-9a-f]{8,}\b"), "*"),
    (re.compile(r"\b(pid|wall|wall_time_s)[= ]\S+"), r"\1 *"),
)


def reason_signature(reason: str) -> str:
    """A failure reason without what changes from run to run (work folders, ids).

    Two trials whose reasons have the same signature failed the same way.
    """
    text = str(reason)
    for pattern, repl in _SIGNATURE_SUBS:
        text = pattern.sub(repl, text)
    return text.strip()


def _json_default(obj: Any) -> Any:
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, np.generic):
        return obj.item()
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


def _write_json(path: Path, data: Mapping[str, Any]) -> None:
    text = json.dumps(data, indent=1, default=_json_default, allow_nan=True)

    def writer(tmp: str) -> None:
        Path(tmp).write_text(text, encoding="utf-8")

    atomic_write_bytes(path, writer)


def _journal_default(obj: Any) -> Any:
    if isinstance(obj, (pd.Timestamp,)) or hasattr(obj, "isoformat"):
        return obj.isoformat()
    return _json_default(obj)


def _read_journal(path: Path) -> list[dict[str, Any]]:
    """Rows of a journal; a last line cut by a kill is ignored."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        return []
    except (OSError, UnicodeDecodeError) as exc:
        raise InputDataError(f"trial-log journal {str(path)!r} is unreadable ({exc}); move it "
                             "aside to resume from the parquet table alone.") from None
    lines = text.split("\n")
    rows = []
    for n, line in enumerate(lines, start=1):
        if not line.strip():
            continue
        try:
            row = json.loads(line)
        except ValueError:
            if n == len(lines):  # no newline after it: a write cut short
                break
            raise InputDataError(
                f"trial-log journal {str(path)!r}: line {n} is not a JSON row; the file is "
                "damaged. Move it aside to resume from the parquet table alone."
            ) from None
        if not isinstance(row, dict) or "trial" not in row:
            raise InputDataError(f"trial-log journal {str(path)!r}: line {n} is not a trial row.")
        rows.append(row)
    return rows


def _normalise(df: pd.DataFrame) -> pd.DataFrame:
    """The log's column types (ints, UTC times, strings)."""
    for col in ("trial", "batch", "n_data", "seed"):
        if col in df.columns:
            df[col] = df[col].astype("int64")
    for col in ("started_at", "finished_at"):
        if col in df.columns:
            df[col] = pd.to_datetime(df[col], utc=True, format="ISO8601")
    for col in ("source", "status", "error", "version", "predictions"):
        if col in df.columns:
            df[col] = df[col].fillna("").astype(str)
    return df


def read_trials(path: str | os.PathLike[str]) -> pd.DataFrame:
    """Read a trial log (table and journal), sorted by trial index.

    Raises
    ------
    InputDataError
        If the file is missing, damaged or is not a trial log.
    """
    p = Path(path)
    journal = _read_journal(journal_path(p))
    if not p.is_file() and not journal:
        raise InputDataError(f"trial log {str(p)!r} does not exist; check the path.")
    frames = []
    if p.is_file():
        try:
            frames.append(pd.read_parquet(p))
        except Exception as exc:  # truncated or foreign file: pyarrow raises several kinds
            raise InputDataError(
                f"trial log {str(p)!r} is not a readable parquet table ({type(exc).__name__}: "
                f"{exc}); it may be truncated. Restore it from a backup or start a new --out."
            ) from None
    if journal:
        frames.append(_normalise(pd.DataFrame.from_records(journal)))
    df = frames[0] if len(frames) == 1 else pd.concat(frames, ignore_index=True)
    missing = [c for c in BASE_COLUMNS if c not in df.columns]
    if missing:
        raise InputDataError(
            f"{str(p)!r} is not a profshape trial log: columns {missing} are missing."
        )
    if len(frames) > 1:
        df = df.drop_duplicates("trial", keep="last")
    return df.sort_values("trial", kind="stable").reset_index(drop=True)


def read_predictions(row: Mapping[str, Any] | pd.Series) -> dict[str, dict[str, Any]]:
    """Decode the ``predictions`` JSON of one log row into arrays.

    Returns
    -------
    dict of label to dict
        ``{"z_m": ndarray, "ion_velocity_m_s": ndarray, "scalars": dict, ...}``;
        arrays are ``None`` for failed points.
    """
    raw = json.loads(row["predictions"] or "{}")
    out = {}
    for label, p in raw.items():
        p = dict(p)
        for key in ("z_m", "ion_velocity_m_s"):
            if p.get(key) is not None:
                p[key] = np.asarray(p[key], dtype=float)
        out[label] = p
    return out


class TrialLog:
    """Append-only trial log (journal compacted to parquet) with an atomic JSON sidecar.

    Parameters
    ----------
    path : path-like
        The ``.parquet`` file.
    parameter_names : sequence of str
        Searched parameter names (column order).
    labels : sequence of str, optional
        Operating-point labels, so every ``misfit__<label>`` column exists
        from the first row on.
    """

    def __init__(
        self,
        path: str | os.PathLike[str],
        parameter_names: Sequence[str],
        labels: Sequence[str] = (),
    ) -> None:
        self.path = Path(path)
        self.sidecar = sidecar_path(self.path)
        self.journal = journal_path(self.path)
        self.parameter_names = tuple(parameter_names)
        self.labels = tuple(labels)
        self._rows: list[dict[str, Any]] = []
        self._fh: Any = None
        self._pending = 0
        self._last_compact = time.monotonic()

    # ---------------------------------------------------------------- rows
    @property
    def rows(self) -> list[dict[str, Any]]:
        """Rows written so far (copies are not made; do not modify)."""
        return self._rows

    def load(self) -> pd.DataFrame:
        """Read the existing log into memory (for resume) and return it."""
        df = read_trials(self.path)
        absent = [n for n in self.parameter_names if n not in df.columns]
        if absent:
            raise InputDataError(
                f"trial log {str(self.path)!r} has no columns for parameters {absent}; it was "
                "written by a search over other parameters. Use a new log path."
            )
        self._rows = [{str(k): v for k, v in r.items()} for r in df.to_dict(orient="records")]
        if self.journal.exists() and self.journal.stat().st_size:
            self.compact()  # fold the journal in, so the next append starts it afresh
        return df

    def drop_trials(self, trials: Any) -> None:
        """Forget rows (to be run again); the table drops them at the next compaction."""
        drop = {int(t) for t in trials}
        self._rows = [r for r in self._rows if int(r["trial"]) not in drop]

    def append(self, row: Mapping[str, Any]) -> None:
        """Add one finished trial: one fsync-ed journal line; compact now and then."""
        row = dict(row)
        self._rows.append(row)
        line = json.dumps(row, default=_journal_default, allow_nan=True)
        if self._fh is None:  # the journal holds nothing the table lacks (see load)
            self._fh = open(self.journal, "w", encoding="utf-8")
        self._fh.write(line + "\n")
        self._fh.flush()
        os.fsync(self._fh.fileno())
        self._pending += 1
        if (not self.path.exists() or self._pending >= COMPACT_EVERY
                or time.monotonic() - self._last_compact >= COMPACT_INTERVAL_S):
            self.compact()

    def compact(self) -> None:
        """Rewrite the parquet table atomically with every row, then empty the journal."""
        self._write()
        if self._fh is not None:
            self._fh.seek(0)
            self._fh.truncate()
            self._fh.flush()
            os.fsync(self._fh.fileno())
        elif self.journal.exists():
            with open(self.journal, "w", encoding="utf-8") as fh:
                os.fsync(fh.fileno())
        self._pending = 0
        self._last_compact = time.monotonic()

    def close(self) -> None:
        """Compact what the journal holds and close it."""
        if self._pending:
            self.compact()
        if self._fh is not None:
            self._fh.close()
            self._fh = None

    def frame(self) -> pd.DataFrame:
        """The rows as a DataFrame with the documented column order, by trial."""
        if not self._rows:
            return pd.DataFrame(columns=self._columns(set()))
        df = pd.DataFrame.from_records(self._rows)
        df = df.reindex(columns=self._columns(set(df.columns)))
        return df.sort_values("trial", kind="stable").reset_index(drop=True)

    def _columns(self, present: set[str]) -> list[str]:
        misfit = [f"misfit__{lab}" for lab in self.labels]
        extra = sorted(c for c in present if c.startswith("misfit__") and c not in misfit)
        cols = [*BASE_COLUMNS, *misfit, *extra, *self.parameter_names,
                *(f"u__{n}" for n in self.parameter_names), *TAIL_COLUMNS]
        others = sorted(present - set(cols))
        return cols + others

    def _write(self) -> None:
        df = _normalise(self.frame())
        atomic_write_bytes(self.path, lambda tmp: df.to_parquet(tmp, index=False))

    # ------------------------------------------------------------- sidecar
    def write_sidecar(self, data: Mapping[str, Any]) -> None:
        """Write the JSON sidecar atomically."""
        _write_json(self.sidecar, {"version": __version__, **data})

    def read_sidecar(self) -> dict[str, Any]:
        """Read the JSON sidecar."""
        if not self.sidecar.is_file():
            raise InputDataError(
                f"cannot resume: the sidecar {str(self.sidecar)!r} of the trial log is missing."
            )
        try:
            data = json.loads(self.sidecar.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, ValueError) as exc:
            raise InputDataError(
                f"cannot resume: the sidecar {str(self.sidecar)!r} of the trial log is damaged "
                f"({type(exc).__name__}: {exc}); restore it, or start the calibration anew in "
                "another folder."
            ) from None
        missing = [k for k in ("names", "settings", "state") if not isinstance(data, dict)
                   or k not in data]
        state = data.get("state") if isinstance(data, dict) else None
        if not missing and not (isinstance(state, dict) and {"next_trial", "next_batch", "n_sobol",
                                                             "n_user"} <= set(state)):
            missing = ["state"]
        if missing:
            version = data.get("version", "?") if isinstance(data, dict) else "?"
            raise InputDataError(
                f"cannot resume: the sidecar {str(self.sidecar)!r} lacks {missing} (written by "
                f"profshape {version}; this is {__version__}); resume it with the version that "
                "wrote it, or start anew in another folder."
            )
        return data


def nan_if_inf(x: float) -> float:
    """NaN for a non-finite misfit value (the log records failures as NaN)."""
    x = float(x)
    return x if math.isfinite(x) else math.nan


def trial_row(problem: Any, coefficients: Any, unit: Any, *, status: str, reason: str,
              misfit: Any, predictions: Mapping[str, Any], source: str, seed: int | None,
              wall_time_s: float) -> dict[str, Any]:
    """One row of the trial log, the same for the search's trials and the posterior's runs.

    Parameters
    ----------
    problem : CalibrationProblem
        Its ``names`` and ``dataset.labels`` fix the columns.
    coefficients, unit : array_like of shape (d,)
        The coefficients (physical units) and their unit-cube coordinates.
    status, reason : str
        The run's status (``"ok"``, ``"failed"``, ...) and why it failed.
    misfit : object or None
        ``reduced_chi2``, ``chi2``, ``n_data``, ``log_likelihood``, ``per_point``
        and ``per_observable`` (a :class:`profshape.likelihood.Misfit` or alike).
    predictions : mapping label -> Prediction
        Every point's prediction, failed ones too: their status, reason and
        null values are kept in the ``predictions`` JSON.
    source : str
    seed : int or None
        Logged as -1 when None.
    wall_time_s : float

    Returns
    -------
    dict
        Columns ``source``, ``status``, the misfits (NaN unless ok), one
        ``misfit__<label>`` per point and ``misfit__<label>__<observable>``,
        the coefficients and their ``u__`` coordinates, ``wall_time_s``,
        ``error``, ``seed``, ``predictions``. The caller adds ``trial``,
        ``batch`` and times where it has them.
    """
    ok = status == "ok"

    def value(name: str) -> float:
        return nan_if_inf(getattr(misfit, name)) if ok and misfit is not None else math.nan

    row: dict[str, Any] = {
        "source": source,
        "status": status,
        "reduced_chi2": value("reduced_chi2"),
        "chi2": value("chi2"),
        "n_data": int(getattr(misfit, "n_data", 0) or 0),
        "log_likelihood": value("log_likelihood"),
    }
    per_point = getattr(misfit, "per_point", None) or {}
    for lab in problem.dataset.labels:
        row[f"misfit__{lab}"] = nan_if_inf(per_point.get(lab, math.nan)) if ok else math.nan
    for key, v in (getattr(misfit, "per_observable", None) or {}).items():
        lab, _, obs = str(key).rpartition("/")  # labels may hold "/", observable names do not
        row[f"misfit__{lab}__{obs}"] = nan_if_inf(v) if ok else math.nan
    c = np.asarray(coefficients, dtype=float)
    u = np.asarray(unit, dtype=float)
    for j, name in enumerate(problem.names):
        row[name] = float(c[j])
    for j, name in enumerate(problem.names):
        row[f"u__{name}"] = float(u[j])
    preds = {lab: p.to_json_dict() for lab, p in predictions.items() if p is not None}
    row.update(
        wall_time_s=float(wall_time_s),
        error="" if ok else (reason or status),
        seed=-1 if seed is None else int(seed),
        predictions=json.dumps(preds, allow_nan=True),
    )
    return row
