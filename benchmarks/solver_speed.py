"""Speed of the built-in discharge solver (prints figures; not a test).

Run::

    /work/venv/bin/python benchmarks/solver_speed.py

Prints, for the demo device's 300 V point and the default profile:

- the median wall time per converged solve at 100, 200 and 400 cells
  (JIT-warm, one core: numba and BLAS are limited to one thread);
- the growth exponent of the cost with the number of cells;
- the time of the first solve in a fresh process (numba ``cache=True``),
  measured in a subprocess, split into import and solve;
- the peak resident memory of that fresh process.

Goals: <= 0.5 s per solve at the default resolution (160 cells), first call in
a new process <= 5 s, peak memory < 300 MB.
"""

from __future__ import annotations

import json
import os

for _var in ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import statistics  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

_FRESH = r"""
import json, resource, time
t0 = time.perf_counter()
from profshape.solver import SolverSettings, demo_device, demo_operating_points, solve
from profshape.solver.config import default_profile
t1 = time.perf_counter()
dev = demo_device()
r = solve(dev, demo_operating_points()[0], default_profile(dev), SolverSettings())
t2 = time.perf_counter()
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
try:  # VmHWM: high-water mark of this process image (ru_maxrss may carry the parent's)
    with open("/proc/self/status") as fh:
        peak = next(int(l.split()[1]) for l in fh if l.startswith("VmHWM")) / 1024
except (OSError, StopIteration):
    pass
print(json.dumps({"import_s": t1 - t0, "first_solve_s": t2 - t1, "status": r.status,
                  "peak_rss_MB": peak}))
"""


def _pin_one_core() -> None:
    if hasattr(os, "sched_setaffinity"):
        try:
            os.sched_setaffinity(0, {min(os.sched_getaffinity(0))})
        except OSError:
            pass


def main(repeats: int = 5) -> None:
    _pin_one_core()
    from profshape.solver import SolverSettings, demo_device, demo_operating_points, solve
    from profshape.solver.config import default_profile

    device = demo_device()
    point = demo_operating_points()[0]
    profile = default_profile(device)
    print(f"device {device.name}, point {point.label}, default profile, one core")
    solve(device, point, profile, SolverSettings(n_cells=100))  # JIT warm-up
    sizes = [100, 160, 200, 400]
    medians = {}
    for n in sizes:
        times, steps, status = [], [], set()
        for _ in range(repeats if n <= 200 else max(2, repeats // 2)):
            t = time.perf_counter()
            r = solve(device, point, profile, SolverSettings(n_cells=n))
            times.append(time.perf_counter() - t)
            steps.append(r.globals.get("n_steps", 0))
            status.add(r.status)
        medians[n] = statistics.median(times)
        print(
            f"n_cells {n:4d}: median {medians[n]:.3f} s per solve "
            f"(min {min(times):.3f}, max {max(times):.3f}; {int(np.median(steps))} steps, "
            f"status {sorted(status)})"
        )
    exps = np.polyfit(np.log([100, 200, 400]), np.log([medians[n] for n in (100, 200, 400)]), 1)
    print(f"cost grows as n_cells^{exps[0]:.2f} (time step ~ 1/n, work per step ~ n)")
    env = {**os.environ, "NUMBA_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}
    t = time.perf_counter()
    out = subprocess.run([sys.executable, "-c", _FRESH], capture_output=True, text=True,
                         env=env, check=False)
    total = time.perf_counter() - t
    if out.returncode != 0:
        print("fresh-process run failed:", out.stderr[-2000:])
        return
    rec = json.loads(out.stdout.strip().splitlines()[-1])
    print(
        f"fresh process: import {rec['import_s']:.2f} s, first solve {rec['first_solve_s']:.2f} s "
        f"(status {rec['status']}), whole subprocess {total:.2f} s"
    )
    print(f"peak memory of the fresh process: {rec['peak_rss_MB']:.0f} MB")


if __name__ == "__main__":
    main()
