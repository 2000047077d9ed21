#!/usr/bin/env python3
"""A tiny stand-in for an in-house discharge code, speaking the ExternalModel protocol.

Reads ``input.json`` and ``profile.csv`` from its work folder (see
:mod:`profshape.forward.external`), computes an ion velocity from a simple
Ohm's-law picture (the potential falls where the electron resistivity, taken
as 1/profile, is high; ions gain that energy: v = sqrt(2 e dphi / M)), writes
``output.json`` and ``ion_velocity.csv`` (with the plasma potential).

``--mode`` makes it misbehave for the tests: ``exit`` (exit code 3 with a
message on stderr), ``sleep`` (start a child process, record its pid in
``child.pid``, then hang), ``garbage`` (unreadable outputs), ``escape`` (names
an output file outside the work folder), ``not_converged``.
"""

from __future__ import annotations

import argparse
import csv
import json
import math
import subprocess
import sys
import time
from pathlib import Path

E_CHARGE_C = 1.602176634e-19  # CODATA 2018 (exact)
AMU_KG = 1.66053906660e-27  # CODATA 2018
XENON_ION_MASS_KG = 131.293 * AMU_KG - 9.1093837015e-31  # IUPAC atomic weight, CODATA m_e


def ion_velocity(z, values, voltage_V):
    """Ion velocity [m/s] on z for a profile (values > 0) at a discharge voltage."""
    res = [1.0 / v for v in values]
    cum = [0.0]
    for i in range(1, len(z)):
        cum.append(cum[-1] + 0.5 * (res[i] + res[i - 1]) * (z[i] - z[i - 1]))
    drop = [0.9 * voltage_V * c / cum[-1] for c in cum]
    return [math.sqrt(2 * E_CHARGE_C * d / XENON_ION_MASS_KG) + 300.0 for d in drop]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("input")
    ap.add_argument("--mode", default="ok")
    args = ap.parse_args(argv)
    spec = json.loads(Path(args.input).read_text())
    folder = Path(args.input).parent
    if args.mode == "exit":
        print("example_code: cannot mesh the channel (simulated)", file=sys.stderr)
        return 3
    if args.mode == "sleep":
        child = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(120)"])
        (folder / "child.pid").write_text(str(child.pid))
        time.sleep(120)
        return 0
    if args.mode == "garbage":
        (folder / "output.json").write_text("{this is not json")
        return 0
    if args.mode == "escape":
        (folder / "output.json").write_text(json.dumps({"ion_velocity_file": "../../etc/passwd"}))
        return 0
    if args.mode == "not_converged":
        (folder / "output.json").write_text(json.dumps(
            {"status": "not_converged", "reason": "residual 3e-2 after 500 iterations"}))
        return 0
    with open(folder / spec["profile"]["file"], newline="") as fh:
        rows = list(csv.DictReader(fh))
    z = [float(r["z_m"]) for r in rows]
    values = [float(r["value"]) for r in rows]
    voltage = spec["operating_point"]["discharge_voltage_V"]
    v = ion_velocity(z, values, voltage)
    with open(folder / "ion_velocity.csv", "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["z_m", "ion_velocity_m_s", "potential_V"])  # potential: voltage - drop
        drop = [(vi - 300.0) ** 2 * XENON_ION_MASS_KG / (2 * E_CHARGE_C) for vi in v]
        w.writerows(zip(z, v, [voltage - d for d in drop]))
    mdot = spec["operating_point"]["anode_mass_flow_kg_s"]
    current = 1.1 * mdot / XENON_ION_MASS_KG * E_CHARGE_C
    (folder / "output.json").write_text(json.dumps({"scalars": {"discharge_current": current}}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
