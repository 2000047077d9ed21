"""The output folder: opened for a calibration (never clobbering another), read back, named.

Its files are named in :mod:`profshape.workflow.layout`.
"""

from __future__ import annotations

import hashlib
import json
import time
from pathlib import Path

from .._version import __version__
from ..atomic_write import atomic_write_json, atomic_write_text
from ..config import CalibrationConfig, parse_config
from ..exceptions import InputDataError
from ..trials import journal_path, sidecar_path
from .folder_lock import LOCK_FILE
from .layout import CONFIG_COPY, RUN_FILE, TRIALS_FILE

__all__ = ["config_from_folder", "new_folder_name", "open_output_folder"]


def _fingerprint(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def open_output_folder(cfg: CalibrationConfig, out_dir: str | Path, resume: bool = False) -> Path:
    """Prepare ``out_dir`` for this calibration, refusing to clobber another one.

    Raises
    ------
    InputDataError
        If the folder cannot be written, or holds a different calibration.
    """
    out = Path(out_dir)
    run_file = out / RUN_FILE
    fp = _fingerprint(cfg.text)
    if out.exists() and not out.is_dir():
        raise InputDataError(f"output folder {out} exists and is not a folder; choose another --out.")
    if run_file.exists():
        try:
            info = json.loads(run_file.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            raise InputDataError(f"{run_file} is unreadable; choose another output folder.") from None
        # a start refused for bad input before any search began holds no result: reuse it
        refused_start = not resume and not any(
            p.exists() for p in (out / TRIALS_FILE, sidecar_path(out / TRIALS_FILE),
                                 journal_path(out / TRIALS_FILE)))
        if info.get("fingerprint") != fp and not refused_start:
            raise InputDataError(
                f"output folder {out} holds another calibration (its {CONFIG_COPY} differs); "
                "choose a new --out, or `profshape resume` that folder."
            )
        if not resume and (out / TRIALS_FILE).exists():
            raise InputDataError(
                f"output folder {out} already holds this calibration's trials; use "
                f"`profshape resume {out}` to continue it, or choose a new --out."
            )
        if info.get("fingerprint") == fp:
            return out
    elif out.exists() and any(p.name != LOCK_FILE for p in out.iterdir()):
        raise InputDataError(
            f"output folder {out} is not empty and holds no calibration; choose a new or empty --out."
        )
    try:
        out.mkdir(parents=True, exist_ok=True)
        probe = out / ".write-test"
        probe.write_text("")
        probe.unlink()
    except OSError as exc:
        raise InputDataError(
            f"output folder {out} is not writable ({exc.strerror}); choose another --out."
        ) from None
    atomic_write_text(out / CONFIG_COPY, cfg.text)
    atomic_write_json(run_file, {"fingerprint": fp, "base_dir": str(cfg.base_dir),
                            "source": str(cfg.path), "version": __version__,
                            "created": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())}, default=str)
    return out


def config_from_folder(out_dir: str | Path) -> CalibrationConfig:
    """The calibration file stored in an output folder (paths resolve as originally)."""
    out = Path(out_dir)
    run_file, copy = out / RUN_FILE, out / CONFIG_COPY
    if not run_file.exists() or not copy.exists():
        raise InputDataError(
            f"{out} is not a calibration folder (no {RUN_FILE} and {CONFIG_COPY}); give the folder "
            "that `profshape calibrate` or `profshape demo` wrote."
        )
    try:
        info = json.loads(run_file.read_text(encoding="utf-8"))
        base_dir = info["base_dir"]
    except (OSError, UnicodeDecodeError, ValueError, KeyError, TypeError) as exc:
        raise InputDataError(
            f"{run_file} is damaged ({type(exc).__name__}: {exc}); it must hold the JSON that "
            "`profshape calibrate` wrote. Restore it, or start the calibration in a new --out."
        ) from None
    return parse_config(copy.read_text(encoding="utf-8"), path=copy, base_dir=base_dir)


def new_folder_name(prefix: str = "profshape-run") -> Path:
    """A new, unused folder name in the working directory."""
    stamp = time.strftime("%Y%m%d-%H%M%S")
    path = Path.cwd() / f"{prefix}-{stamp}"
    n = 1
    while path.exists():
        n += 1
        path = Path.cwd() / f"{prefix}-{stamp}-{n}"
    return path
