"""Run one program and reap everything it starts (standard library only).

``python _reaper.py GRACE_S -- PROGRAM [ARGS...]``

The external adapter starts every program through this small launcher. It
makes itself a *child subreaper* (Linux ``prctl(PR_SET_CHILD_SUBREAPER)``):
any process the program starts that outlives its parent, even one that
called ``setsid()`` and forked again to become a daemon, is re-parented to
the launcher rather than to init, so the launcher still sees it. When the
program ends, whatever it left behind is killed (SIGKILL) and reaped. On
SIGTERM, SIGINT or SIGHUP, or when the launcher's own parent dies, the whole
tree gets SIGTERM, then SIGKILL after ``GRACE_S`` seconds, and is reaped.

The launcher exits with the program's exit code, or dies of the signal that
ended the program, so the caller sees what the program did. Where the
subreaper flag is not available (not Linux), only the program's process
group can be killed by the caller; a daemon that left it survives.

Run as a script (``python -I path/to/_reaper.py``): it must not import the
package, so it starts in a few tens of milliseconds.
"""

from __future__ import annotations

import contextlib
import ctypes
import os
import signal
import sys
import threading
import time

PR_SET_CHILD_SUBREAPER = 36


class _Stop(Exception):
    """Raised in the main thread by the signal handler."""


def _make_subreaper() -> bool:
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        return int(libc.prctl(PR_SET_CHILD_SUBREAPER, 1, 0, 0, 0)) == 0
    except (OSError, AttributeError):
        return False


def _descendants(root: int) -> list[int]:
    """Every live descendant of ``root``, from /proc's parent links."""
    children: dict[int, list[int]] = {}
    try:
        names = os.listdir("/proc")
    except OSError:
        return []
    for name in names:
        if not name.isdigit():
            continue
        try:
            with open(f"/proc/{name}/stat", "rb") as fh:
                data = fh.read()
        except OSError:
            continue
        fields = data[data.rfind(b")") + 2:].split()
        if len(fields) > 1:
            children.setdefault(int(fields[1]), []).append(int(name))
    out, stack = [], [root]
    while stack:
        for child in children.get(stack.pop(), []):
            out.append(child)
            stack.append(child)
    return out


def _signal_all(sig: int) -> int:
    pids = _descendants(os.getpid())
    for pid in pids:
        with contextlib.suppress(OSError):
            os.kill(pid, sig)
    return len(pids)


def _reap_nohang() -> bool:
    """Reap finished children; True when no child is left."""
    while True:
        try:
            pid, _ = os.waitpid(-1, os.WNOHANG)
        except ChildProcessError:
            return True
        if pid == 0:
            return False


def _kill_and_reap_all(grace_s: float) -> None:
    if grace_s > 0 and _signal_all(signal.SIGTERM):
        deadline = time.monotonic() + grace_s
        while not _reap_nohang() and time.monotonic() < deadline:
            time.sleep(0.02)
    for _ in range(1000):  # a tree that forks while being killed needs a few sweeps
        _signal_all(signal.SIGKILL)
        if _reap_nohang():
            return
        time.sleep(0.005)


def _watch_parent(parent: int) -> None:
    while os.getppid() == parent:
        time.sleep(0.2)
    with contextlib.suppress(OSError):
        os.kill(os.getpid(), signal.SIGTERM)


def _stop(signum: int, frame: object) -> None:
    raise _Stop(signum)


def main(argv: list[str]) -> int:
    """Run the program of ``argv`` (see the module notes); returns its exit code."""
    if len(argv) < 4 or argv[2] != "--":
        print("usage: _reaper.py GRACE_S -- PROGRAM [ARGS...]", file=sys.stderr)
        return 2
    grace_s = float(argv[1])
    args = argv[3:]
    _make_subreaper()
    for sig in (signal.SIGTERM, signal.SIGINT, signal.SIGHUP):
        signal.signal(sig, _stop)
    threading.Thread(target=_watch_parent, args=(os.getppid(),), daemon=True).start()
    try:
        try:
            pid = os.posix_spawnp(args[0], args, dict(os.environ))
        except OSError as exc:
            print(f"cannot start {args[0]!r}: {exc}", file=sys.stderr)
            return 127
        while True:
            done, status = os.waitpid(pid, 0)
            if done == pid:
                break
    except _Stop:
        for sig in (signal.SIGTERM, signal.SIGINT, signal.SIGHUP):
            signal.signal(sig, signal.SIG_IGN)
        _kill_and_reap_all(grace_s)
        return 128 + signal.SIGTERM
    for sig in (signal.SIGTERM, signal.SIGINT, signal.SIGHUP):
        signal.signal(sig, signal.SIG_IGN)
    _kill_and_reap_all(0.0)  # what the finished program left behind
    if os.WIFSIGNALED(status):
        term_sig = os.WTERMSIG(status)
        with contextlib.suppress(OSError, ValueError):  # SIGKILL cannot be handled
            signal.signal(term_sig, signal.SIG_DFL)
        sys.stdout.flush()
        os.kill(os.getpid(), term_sig)
        return 128 + term_sig
    return os.waitstatus_to_exitcode(status)


if __name__ == "__main__":
    sys.exit(main(sys.argv))
