"""External programs that misbehave in the ways of round two (standard library only).

``python _programs.py MODE INPUT_JSON [ARG]``; MODE is one of

clean         the clean model of ``_fault_program.py`` (sleeps ARG seconds first)
flat          writes the same ion velocity whatever the profile (a program that ignores it)
fail          prints "fatal: mesh inverted at cell 12" on stderr and exits 3
fail_reason   writes output.json with status "failed" and a reason, then exits 4
flood_stderr  writes ARG MiB of text to stderr (endless when ARG is 0), then good outputs
big_json      an output.json of ARG MiB (sparse: it costs no disk), exit 0
long_reason   an "ok" output.json whose reason holds ARG characters
many_rows     an ion_velocity.csv of ARG rows
link_output   output.json is a symbolic link to a valid file outside the work folder
daemon        forks a daemon (setsid, second fork) that sleeps 120 s, writes its pid to
              daemon.pid, then writes good outputs and exits 0 (or hangs when ARG is "hang")
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _fault_program as fp  # the clean model, standard library only


def _clean(folder: Path, spec: dict) -> None:
    z, values = [], []
    with open(folder / spec["profile"]["file"]) as fh:
        next(fh)
        for line in fh:
            a, b = line.strip().split(",")
            z.append(float(a))
            values.append(float(b))
    point = spec["operating_point"]
    v = fp._velocity(z, values, float(point["discharge_voltage_V"]))
    fp._write_csv(folder / "ion_velocity.csv", z, v)
    out = {"status": "ok", "scalars": {"discharge_current": 1e-3 * point["discharge_voltage_V"]}}
    (folder / "output.json").write_text(json.dumps(out))


def _daemon(folder: Path) -> None:
    if os.fork() == 0:  # child: leave the session, fork again, the grandchild lingers
        os.setsid()
        if os.fork() == 0:
            (folder / "daemon.pid").write_text(str(os.getpid()))
            time.sleep(120)  # keeps the run's stdout and stderr open, as daemons do
        os._exit(0)
    for _ in range(200):  # wait until the daemon has told its pid
        if (folder / "daemon.pid").exists():
            break
        time.sleep(0.01)


def main(argv: list[str]) -> int:
    mode, input_path = argv[1], Path(argv[2])
    arg = argv[3] if len(argv) > 3 else ""
    folder = input_path.parent
    spec = json.loads(input_path.read_text())
    if mode == "clean":
        time.sleep(float(arg or 0))
        _clean(folder, spec)
    elif mode == "flat":
        z = [0.0, 0.02, 0.04, 0.06]
        fp._write_csv(folder / "ion_velocity.csv", z, [300.0, 5000.0, 15000.0, 17000.0])
        (folder / "output.json").write_text(json.dumps({"status": "ok"}))
    elif mode == "fail":
        print("solver 1.2 starting", file=sys.stderr)
        print("fatal: mesh inverted at cell 12", file=sys.stderr)
        return 3
    elif mode == "fail_reason":
        (folder / "output.json").write_text(json.dumps(
            {"status": "failed", "reason": "mesh inverted at cell 12"}))
        return 4
    elif mode == "flood_stderr":
        chunk = ("x" * 1023 + "\n").encode() * 64  # 64 KiB
        n = int(float(arg) * 16) if float(arg or 0) > 0 else None
        i = 0
        while n is None or i < n:
            sys.stderr.buffer.write(chunk)
            i += 1
        _clean(folder, spec)
    elif mode == "big_json":
        with open(folder / "output.json", "wb") as fh:
            fh.write(b'{"status": "ok", "reason": "')
            fh.truncate(int(float(arg) * 2**20))
    elif mode == "long_reason":
        _clean(folder, spec)
        out = json.loads((folder / "output.json").read_text())
        out["reason"] = "r" * int(arg)
        (folder / "output.json").write_text(json.dumps(out))
    elif mode == "many_rows":
        _clean(folder, spec)
        with open(folder / "ion_velocity.csv", "w") as fh:
            fh.write("z_m,ion_velocity_m_s\n")
            fh.write("0.01,1000.0\n" * int(arg))
    elif mode == "link_output":
        outside = folder.parent.parent / "outside_output.json"
        outside.write_text(json.dumps({"status": "ok", "scalars": {"discharge_current": 1.0}}))
        os.symlink(outside, folder / "output.json")
    elif mode == "daemon":
        _daemon(folder)
        if arg == "hang":
            time.sleep(120)
        _clean(folder, spec)
    else:
        print(f"unknown mode {mode!r}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
