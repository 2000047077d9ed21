"""A tiny external forward program that misbehaves on purpose (standard library only).

Run as ``python _fault_program.py INPUT_JSON [RATE] [KINDS]``. It reads the input
and profile files the external adapter writes, computes the same clean model as
``reliability._faulty`` and, for a fraction RATE of runs chosen by a hash of
(coefficients, operating-point label), shows one fault of KINDS (comma-separated):

exit          exits with code 3 after printing to stderr
nan           writes a NaN velocity
inf           reports an infinite discharge current
ragged        a CSV row with a value missing (wrong number of values)
truncated     output.json cut in the middle (a crash during the write)
truncated_csv ion_velocity.csv cut in the middle of a row, output.json intact
hang          sleeps far past any timeout, with a child process that ignores SIGTERM
garbage       prints binary garbage on stdout and stderr but writes good outputs (ok)
escape        names an output file outside its work folder
not_converged reports status "not_converged"

The test imports :func:`decide` to know which runs must fail and how.
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
import signal
import subprocess
import sys
import time
from pathlib import Path

# CODATA 2018 values (scipy.constants); xenon atomic weight 131.293 (from memory).
E_C = 1.602176634e-19
AMU = 1.66053906660e-27
M_E = 9.1093837015e-31
XENON_ION_MASS_KG = 131.293 * AMU - M_E

KINDS = ("exit", "nan", "inf", "ragged", "truncated", "truncated_csv", "hang", "garbage",
         "escape", "not_converged")
#: Kinds after which the run is expected to succeed.
SURVIVABLE_OK = ("garbage",)


def decide(coefficients: dict, label: str, rate: float, kinds: tuple[str, ...]) -> str | None:
    """The fault (or None) of a run; same hash as reliability._faulty.fault_draw."""
    text = repr(sorted((k, repr(float(v))) for k, v in coefficients.items())) + "|" + label
    r = int.from_bytes(hashlib.sha256(text.encode()).digest()[:8], "big") / 2.0**64
    if r >= rate:
        return None
    return kinds[min(int(r / rate * len(kinds)), len(kinds) - 1)]


def _velocity(z: list[float], values: list[float], voltage: float) -> list[float]:
    res = [1.0 / v for v in values]
    cum = [0.0]
    for i in range(1, len(z)):
        cum.append(cum[-1] + 0.5 * (res[i] + res[i - 1]) * (z[i] - z[i - 1]))
    return [math.sqrt(2.0 * E_C * 0.9 * voltage * c / cum[-1] / XENON_ION_MASS_KG) + 300.0
            for c in cum]


def _write_csv(path: Path, z: list[float], v: list[float]) -> None:
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["z_m", "ion_velocity_m_s"])
        for a, b in zip(z, v):
            w.writerow([repr(a), repr(b)])


def main(argv: list[str]) -> int:
    spec = json.loads(Path(argv[1]).read_text())
    rate = float(argv[2]) if len(argv) > 2 else 0.0
    kinds = tuple(argv[3].split(",")) if len(argv) > 3 else KINDS
    folder = Path(argv[1]).parent
    z, values = [], []
    with open(folder / spec["profile"]["file"]) as fh:
        for row in csv.DictReader(fh):
            z.append(float(row["z_m"]))
            values.append(float(row["value"]))
    point = spec["operating_point"]
    v = _velocity(z, values, float(point["discharge_voltage_V"]))
    out = {"status": "ok", "scalars": {"discharge_current": 1e-3 * point["discharge_voltage_V"]}}
    fault = decide(spec["profile"]["coefficients"], point["label"], rate, kinds)
    if fault == "exit":
        print("fatal: matrix singular at cell 17", file=sys.stderr)
        return 3
    if fault == "hang":
        child = subprocess.Popen(
            [sys.executable, "-c",
             "import signal, time; signal.signal(signal.SIGTERM, signal.SIG_IGN); time.sleep(120)"])
        (folder / "child.pid").write_text(str(child.pid))
        signal.signal(signal.SIGTERM, signal.SIG_IGN)
        time.sleep(120)
        return 0
    if fault == "garbage":
        sys.stdout.buffer.write(bytes(range(256)) * 4)
        sys.stderr.buffer.write(b"\xff\xfe warning: \x00\x1b[31m nonsense\n")
    if fault == "nan":
        v[len(v) // 2] = math.nan
    if fault == "inf":
        out["scalars"]["discharge_current"] = math.inf
    if fault == "not_converged":
        out = {"status": "not_converged", "reason": "residual stalled at 1e-3"}
    if fault == "escape":
        out["ion_velocity_file"] = "../../escaped.csv"
    _write_csv(folder / "ion_velocity.csv", z, v)
    if fault == "ragged":
        text = (folder / "ion_velocity.csv").read_text().splitlines()
        text[5] = text[5].split(",")[0] + ","
        (folder / "ion_velocity.csv").write_text("\n".join(text) + "\n")
    if fault == "truncated_csv":
        text = (folder / "ion_velocity.csv").read_text()
        cut = text.rfind("\n", 0, len(text) // 2) + 1
        (folder / "ion_velocity.csv").write_text(text[:cut] + text[cut:].split(",")[0])
    body = json.dumps(out)
    if fault == "truncated":
        body = body[: len(body) // 2]
    (folder / "output.json").write_text(body)
    if fault == "escape":  # the file it names really exists outside, holding good data
        _write_csv(folder.parent.parent / "escaped.csv", z, v)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
