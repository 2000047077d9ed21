"""Wall-clock of a search with 1 worker (q = 1) against 2 workers (q = 2).

The forward model is the built-in solver at the demo device's two operating
points on a fine grid (``--n-cells 400`` by default, about 1-2 s of CPU per
operating point, so the forward model dominates the search's own overhead);
the same budget is run both ways, each on its own local process pool, the two
configurations interleaved (1 worker, 2 workers, 1 worker, ... for ``--reps``
repetitions) so that a change of the machine's load hits both alike. Default
search settings are used. Two ratios are printed: the plain wall-clock
speed-up (summed over repetitions), and the speed-up normalised by the summed
wall time of the trials themselves (wall per second of forward-model work),
which removes the difference in work between the two runs (they propose
different trials after the shared initial design, and run times differ
between profiles). Goal: >= 1.7x when the forward model dominates. The CPU
time of this (the search's) process is printed too: it is the search overhead
plus the bookkeeping of the trial log.

Usage::

    python benchmarks/parallel_speedup.py [--budget 12] [--n-cells 400] [--reps 2] [--quick]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np

from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.executors import local_executor
from profshape.forward.builtin import BuiltinSolverModel
from profshape.problem import CalibrationProblem
from profshape.search import SearchSettings, run_search
from profshape.shapes import get_family
from profshape.solver import SolverSettings, demo_device, demo_operating_points

TRUTH = np.array([-2.6, -1.0, 0.026, 0.004])


def make_problem(n_cells: int) -> CalibrationProblem:
    family = get_family("smooth_step", channel_length_m=0.024)
    model = BuiltinSolverModel(demo_device(), SolverSettings(n_cells=n_cells))
    rng = np.random.default_rng(0)
    points = []
    for point in demo_operating_points():
        p = model(family.profile(TRUTH), point)
        z = np.linspace(0.008, 0.055, 16)
        sigma = np.full_like(z, 250.0)
        v = np.interp(z, p.z_m, p.ion_velocity_m_s) + sigma * rng.normal(size=z.size)
        points.append(OperatingPointData(point, IonVelocityProfile(z, v, sigma)))
    return CalibrationProblem(family, DataSet(points), model)


def timed(problem, q: int, workers: int, budget: int, folder: Path
          ) -> tuple[float, int, float, float, dict]:
    settings = SearchSettings(budget=budget, batch_size=q, n_initial=4, seed=0, progress=False)
    with local_executor(workers) as pool:
        # warm the workers (imports, numba compilation) outside the timing
        list(pool.map(_warm, range(workers)))
        t0, c0 = time.perf_counter(), time.process_time()
        res = run_search(problem, settings, folder / f"q{q}_w{workers}.parquet", executor=pool)
        wall, cpu = time.perf_counter() - t0, time.process_time() - c0
        statuses = res.trials["status"].value_counts().to_dict()
        return wall, res.n_trials, cpu, float(res.trials["wall_time_s"].sum()), statuses


def _warm(_: int) -> None:
    from profshape.solver import solve

    family = get_family("smooth_step", channel_length_m=0.024)
    solve(demo_device(), demo_operating_points()[0], family.profile(TRUTH),
          SolverSettings(n_cells=40))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--budget", type=int, default=12)
    ap.add_argument("--n-cells", type=int, default=400)
    ap.add_argument("--reps", type=int, default=2, help="interleaved repetitions of each setup")
    ap.add_argument("--quick", action="store_true", help="budget 8, one repetition")
    args = ap.parse_args()
    budget = 8 if args.quick else args.budget
    reps = 1 if args.quick else args.reps
    problem = make_problem(args.n_cells)
    t_run = time.perf_counter()
    problem.evaluate(problem.from_unit(np.full(problem.dim, 0.5)))
    t_run = time.perf_counter() - t_run
    setups = {"1 worker,  q = 1": (1, 1), "2 workers, q = 2": (2, 2)}
    runs: dict[str, list] = {k: [] for k in setups}
    with tempfile.TemporaryDirectory() as tmp:
        for rep in range(reps):
            for name, (q, workers) in setups.items():
                folder = Path(tmp) / f"rep{rep}"
                folder.mkdir(exist_ok=True)
                runs[name].append(timed(problem, q, workers, budget, folder))
    print(f"forward trial (2 operating points, serial, n_cells {args.n_cells}): {t_run:.2f} s; "
          f"budget {budget}; {reps} interleaved repetition(s)")
    print(f"{'setup':<22}{'rep':>4}{'trials':>8}{'wall [s]':>12}{'search CPU [s]':>16}"
          f"{'sum trial wall [s]':>20}  statuses")
    tot = {}
    for name, rr in runs.items():
        for i, (t, n, c, f, st) in enumerate(rr):
            print(f"{name:<22}{i:>4}{n:>8}{t:>12.2f}{c:>16.2f}{f:>20.2f}  {st}")
        tot[name] = (sum(r[0] for r in rr), sum(r[3] for r in rr))
    (w1, f1), (w2, f2) = tot.values()
    print(f"speed-up: {w1 / w2:.2f}x wall-clock; {(w1 / f1) / (w2 / f2):.2f}x per second of "
          "forward-model work (goal >= 1.7x)")


if __name__ == "__main__":
    main()
