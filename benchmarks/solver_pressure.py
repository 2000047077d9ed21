"""Response of the built-in solver to facility background pressure (prints a table).

Run::

    PYTHONPATH=$PWD /work/venv/bin/python benchmarks/solver_pressure.py

Demo device, 300 V, 4.5 mg/s xenon, default profile; background xenon at 300 K
from 0 (space) to 6e-3 Pa (4.5e-5 Torr). Prints the ingested flow, discharge
current, thrust, mass utilization and the position where the potential has
fallen to half the discharge voltage (the acceleration region's centre).
"""

from __future__ import annotations

import os

for _var in ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402


def main() -> None:
    from profshape.operating_point import OperatingPoint
    from profshape.solver import SolverSettings, demo_device, solve
    from profshape.solver.config import default_profile

    device = demo_device()
    profile = default_profile(device)
    print(f"{'p[Pa]':>8} {'status':>12} {'ingest[mg/s]':>12} {'I_d[A]':>7} {'T[mN]':>7} "
          f"{'eta_m':>6} {'z_half[mm]':>10}")
    for p in (0.0, 1e-3, 2e-3, 4e-3, 6e-3):
        point = OperatingPoint("p", 300.0, 4.5e-6, "xenon", background_pressure_Pa=p)
        r = solve(device, point, profile, SolverSettings())
        g = r.globals
        c = r.cells
        z_half = float(np.interp(-150.0, -c["potential_V"].to_numpy(), c["z_m"].to_numpy()))
        print(f"{p:8.1e} {r.status:>12} {1e6 * g['ingested_mass_flow_kg_s']:12.3f} "
              f"{g['discharge_current_A']:7.3f} {1e3 * g['thrust_N']:7.2f} "
              f"{g['mass_utilization']:6.3f} {1e3 * z_half:10.2f}", flush=True)


if __name__ == "__main__":
    main()
