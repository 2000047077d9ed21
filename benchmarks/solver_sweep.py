"""Robustness sweep of the built-in solver (prints a table; not a test).

Run::

    PYTHONPATH=$PWD /work/venv/bin/python benchmarks/solver_sweep.py [--cells 160 320 640]
        [--quick]

Sweeps the demo device over discharge voltage 150-600 V, anode flow 2-8 mg/s,
xenon and krypton, a uniform Bohm-like anomalous coefficient 1e-4 to 1, and the
grid (160 / 320 / 640 cells by default). Every run must end "ok",
"oscillating", "not_converged" or "failed" with a reason; the script counts the
statuses and lists every "ok"/"oscillating" run that breaks the ion energy
bound (potential above V_d + anode fall + 2 % + 2 T_e, an ion faster than
sqrt(2 e phi_max / M), or an exit energy above e (V_d + fall)) or whose "ok" current swings by more than 1 % rms, or whose discharge went out (anode
efficiency above 1, mass utilization below 1 %), and
every run that raised. ``--quick`` keeps the corners of the ranges only. The CI
test ``tests/solver/test_solver_sweep.py`` runs a small subset.
"""

from __future__ import annotations

import argparse
import itertools
import math
import os
import time

for _var in ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402


def check(result, point) -> str:
    """'' if the result keeps its promises, else what it breaks."""
    from profshape.propellants import get_propellant

    if result.status not in ("ok", "oscillating", "not_converged", "failed"):
        return f"unknown status {result.status!r}"
    if not result.reason:
        return "no reason"
    if result.status not in ("ok", "oscillating"):
        return ""
    g = result.globals
    v_d = point.discharge_voltage_V
    edge = v_d + max(g["anode_fall_V"], 0.0)
    phi = float(result.cells["potential_V"].max())
    te0 = float(result.cells["electron_temperature_eV"].iloc[0])
    if phi > edge + 0.02 * v_d + 2.0 * te0:
        return f"potential {phi:.1f} V above the sheath edge {edge:.1f} V"
    v_max = get_propellant(point.propellant).max_ion_velocity(max(edge, phi))
    if float(np.max(result.ion_velocity_m_s)) > 1.02 * v_max:
        return f"ion speed {np.max(result.ion_velocity_m_s):.0f} above the bound {v_max:.0f}"
    if g["exit_ion_energy_eV"] > 1.02 * edge:
        return f"exit ion energy {g['exit_ion_energy_eV']:.1f} eV above e (V_d + fall)"
    if g["anode_efficiency"] > 1.0 or g["mass_utilization"] < 0.01:
        return (f"discharge gone out: anode efficiency {g['anode_efficiency']:.3g}, mass "
                f"utilization {g['mass_utilization']:.3g}")
    if result.status == "ok" and g["oscillation_relative_amplitude"] > 0.01:
        return f"'ok' with {g['oscillation_relative_amplitude']:.1%} rms"
    if result.status == "oscillating" and g["oscillation_periods"] < 5:
        return f"'oscillating' over only {g['oscillation_periods']:.0f} periods"
    return ""


def main() -> None:
    from profshape.operating_point import OperatingPoint
    from profshape.profile import AnomalousProfile
    from profshape.solver import SolverSettings, demo_device, solve

    ap = argparse.ArgumentParser()
    ap.add_argument("--cells", type=int, nargs="+", default=[160, 320, 640])
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args()
    volts = [150.0, 600.0] if args.quick else [150.0, 300.0, 450.0, 600.0]
    flows = [2e-6, 8e-6] if args.quick else [2e-6, 4.5e-6, 8e-6]
    coefs = [1e-4, 1.0] if args.quick else [1e-4, 1e-3, 1e-2, 1.0 / 16.0, 1.0]
    device = demo_device()
    counts: dict[str, int] = {}
    broken = []
    t0 = time.perf_counter()
    for n, prop, v, mdot, c in itertools.product(args.cells, ("xenon", "krypton"), volts,
                                                 flows, coefs):
        point = OperatingPoint(f"{prop[:2]}{v:.0f}", v, mdot, prop)
        profile = AnomalousProfile("bohm", lambda z, c=c: np.full_like(z, c))
        try:
            r = solve(device, point, profile, SolverSettings(n_cells=n))
        except Exception as exc:  # a valid configuration must never raise
            broken.append((n, prop, v, mdot, c, f"raised {type(exc).__name__}: {exc}"))
            continue
        counts[r.status] = counts.get(r.status, 0) + 1
        why = check(r, point)
        if why:
            broken.append((n, prop, v, mdot, c, why))
        cur = r.globals.get("discharge_current_A", math.nan)
        print(f"{n:4d} {prop:8s} {v:4.0f} V {1e6 * mdot:3.1f} mg/s coef {c:7.1e}: "
              f"{r.status:13s} I_d {cur:7.3f} A  {r.reason[:90]}", flush=True)
    print(f"\nstatus counts: {counts}; {time.perf_counter() - t0:.0f} s")
    print(f"runs breaking a promise: {len(broken)}")
    for row in broken:
        print("  ", row)


if __name__ == "__main__":
    main()
