"""An exclusive lock on a calibration's output folder (one writer at a time).

``profshape calibrate`` and ``profshape resume`` hold the lock while they
write; a second writer is refused with the holder named (pid, host, command,
start time). ``profshape report`` only reads and needs no lock.

The lock is the file ``.profshape.lock`` in the folder, holding the holder's
pid, host, command line and start time, with a :func:`fcntl.flock` lock held
on it for the life of the process. The kernel drops that lock when the
process ends, however it ends (even by SIGKILL), so a lock file left behind
by a dead holder is recognised as stale and taken over. Network file systems
that do not support ``flock`` across hosts cannot be protected this way: run
one calibration per folder there.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import socket
import sys
import time
from collections.abc import Iterator
from pathlib import Path

from ..exceptions import FolderLockedError, InputDataError

__all__ = ["LOCK_FILE", "FolderLockedError", "lock_output_folder"]

LOCK_FILE = ".profshape.lock"


def _holder(fd: int) -> dict:
    with contextlib.suppress(OSError, ValueError):
        os.lseek(fd, 0, os.SEEK_SET)
        return json.loads(os.read(fd, 65536).decode("utf-8") or "{}")
    return {}


@contextlib.contextmanager
def lock_output_folder(folder: str | os.PathLike[str]) -> Iterator[Path]:
    """Hold the exclusive write lock of ``folder`` (made if missing) for the ``with`` block.

    Raises
    ------
    FolderLockedError
        If another live process holds it; the message names that process.
    InputDataError
        If the lock file cannot be made (folder not writable).
    """
    folder = Path(folder)
    path = folder / LOCK_FILE
    if folder.exists() and not folder.is_dir():
        raise InputDataError(f"output folder {folder} exists and is not a folder; choose another "
                             "--out.")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputDataError(
            f"output folder {folder} is not writable ({exc.strerror}); choose another --out."
        ) from None
    for _ in range(20):
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            raise InputDataError(
                f"output folder {folder} is not writable ({exc.strerror}); choose another --out."
            ) from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            info = _holder(fd)
            os.close(fd)
            raise FolderLockedError(
                f"output folder {folder} is in use by another profshape process (pid "
                f"{info.get('pid', '?')} on host {info.get('host', '?')}, started "
                f"{info.get('started', '?')}: {info.get('command', '?')}); wait for it to "
                f"finish or stop it, or choose another --out. `profshape report {folder}` "
                "may run meanwhile."
            ) from None
        # the file may have been removed and made anew by its last holder meanwhile
        try:
            same = os.fstat(fd).st_ino == os.stat(path).st_ino
        except FileNotFoundError:
            same = False
        if same:
            break
        os.close(fd)
    else:  # pragma: no cover - twenty lost races in a row
        raise FolderLockedError(f"output folder {folder}: could not take its lock; try again.")
    stale = _holder(fd)  # a lock file left by a holder that died: the kernel freed its lock
    info = {"pid": os.getpid(), "host": socket.gethostname(),
            "started": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
            "command": " ".join(sys.argv)[:500]}
    if stale.get("pid"):
        info["took_over_from"] = {k: stale.get(k) for k in ("pid", "host", "started")}
    os.ftruncate(fd, 0)
    os.lseek(fd, 0, os.SEEK_SET)
    os.write(fd, json.dumps(info).encode("utf-8"))
    os.fsync(fd)
    try:
        yield path
    finally:
        with contextlib.suppress(OSError):
            os.unlink(path)
        os.close(fd)
