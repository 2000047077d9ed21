"""Atomic file writes: a temporary file in the same folder, ``fsync``, :func:`os.replace`.

A reader (or a run interrupted half-way) sees either the old file or the new
one, never a torn one. Every file of an output folder is written this way:
the trial log, posterior, bands, predictions, summary and report.
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

__all__ = ["atomic_write_bytes", "atomic_write_json", "atomic_write_text", "json_safe"]


def _fsync_dir(folder: Path) -> None:
    with contextlib.suppress(OSError):  # not every platform can open a folder
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _current_umask() -> int:
    """The process umask, read without changing it where Linux allows (thread-safe)."""
    with contextlib.suppress(OSError, ValueError):
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("Umask:"):
                return int(line.split()[1], 8)
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def atomic_write_bytes(path: str | os.PathLike[str], writer: Callable[[str], Any]) -> None:
    """Write a file atomically: temp file in the same folder, fsync, os.replace.

    Parameters
    ----------
    path : path-like
        Destination (its folder is created if missing).
    writer : callable
        ``writer(tmp_path)`` writes the full content to ``tmp_path``.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        # mkstemp makes the file 0600; give it the usual mode (0666 less the umask), so
        # logs on a shared cluster are readable by the group as other outputs are
        os.chmod(tmp, 0o666 & ~_current_umask())
        writer(tmp)
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    _fsync_dir(path.parent)


def atomic_write_text(path: str | os.PathLike[str], text: str) -> None:
    """Write ``text`` (UTF-8) to ``path`` atomically."""
    atomic_write_bytes(path, lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))


def atomic_write_json(path: str | os.PathLike[str], data: Any, **dumps_kwargs: Any) -> None:
    """Write ``json.dumps(data, **dumps_kwargs)`` to ``path`` atomically (indent 2 by default)."""
    dumps_kwargs.setdefault("indent", 2)
    atomic_write_text(path, json.dumps(data, **dumps_kwargs))


def json_safe(obj: Any) -> Any:
    """A JSON-safe copy: non-finite floats become None, numpy scalars plain numbers.

    Mappings get string keys; tuples become lists; other values pass unchanged.
    """
    import math

    import numpy as np

    if isinstance(obj, dict):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        return float(obj) if math.isfinite(float(obj)) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj
