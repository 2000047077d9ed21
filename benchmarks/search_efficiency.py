"""Forward runs to reach a target reduced chi-square, and the search's own overhead.

Part 1: synthetic-truth calibration with the built-in solver (demo device,
300 V point, smooth-step family). For each seed, the number of forward trials
until the best reduced chi-square reaches ``--target`` for: this search,
scrambled Sobol random search, scipy's differential_evolution and
Nelder-Mead, all at the same budget (a method that never reaches the target
counts as budget + 1). Median over seeds, and ratios to this search.

Part 2: time per proposal (GP fit plus acquisition optimisation) at 50, 100
and 200 trials for d = 4 and 8, on random data.

Usage::

    python benchmarks/search_efficiency.py [--seeds 5] [--budget 60] [--quick]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import torch
from scipy.optimize import differential_evolution, minimize
from scipy.stats import qmc

from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.forward.builtin import BuiltinSolverModel
from profshape.problem import CalibrationProblem
from profshape.search import Search, SearchSettings, SearchSpace
from profshape.shapes import get_family
from profshape.solver import SolverSettings, demo_device, demo_operating_points

TRUTH = np.array([-2.6, -1.0, 0.026, 0.004])


def make_problem(n_cells: int) -> CalibrationProblem:
    family = get_family("smooth_step", channel_length_m=0.024)
    model = BuiltinSolverModel(demo_device(), SolverSettings(n_cells=n_cells))
    point = demo_operating_points()[0]
    p = model(family.profile(TRUTH), point)
    rng = np.random.default_rng(0)
    z = np.linspace(0.008, 0.055, 16)
    sigma = np.full_like(z, 250.0)
    v = np.interp(z, p.z_m, p.ion_velocity_m_s) + sigma * rng.normal(size=z.size)
    return CalibrationProblem(family, DataSet([OperatingPointData(point, IonVelocityProfile(
        z, v, sigma))]), model)


class Counter:
    """Objective on the unit cube that records the best-so-far per call."""

    def __init__(self, problem, budget):
        self.problem, self.budget, self.history = problem, budget, []

    def __call__(self, u):
        if len(self.history) >= self.budget:
            raise StopIteration
        out = self.problem.evaluate(self.problem.from_unit(np.clip(u, 0, 1)))
        val = out.misfit.reduced_chi2 if out.ok else np.inf
        self.history.append(val)
        return val if np.isfinite(val) else 1e6

    def runs_to(self, target):
        best = np.minimum.accumulate(np.array([*self.history, np.inf]))
        hit = np.flatnonzero(best <= target)
        return int(hit[0]) + 1 if hit.size else self.budget + 1


def run_bo(problem, budget, seed, target):
    c = Counter(problem, budget)
    s = Search(problem, SearchSettings(budget=budget, seed=seed, num_restarts=4, raw_samples=128,
                                       target_reduced_chi2=target, progress=False))
    while not s.stop_reason():
        for p in s.ask():
            v = c(p.u)
            s.tell(p.trial, v if v < 1e6 else None)
    return c.runs_to(target)


def run_sobol(problem, budget, seed, target):
    c = Counter(problem, budget)
    for u in qmc.Sobol(problem.dim, seed=seed).random(budget):
        c(u)
    return c.runs_to(target)


def run_de(problem, budget, seed, target):
    c = Counter(problem, budget)
    try:
        differential_evolution(c, [(0, 1)] * problem.dim, seed=seed, maxiter=10**6, popsize=5,
                               polish=False, tol=0)
    except StopIteration:
        pass
    return c.runs_to(target)


def run_nm(problem, budget, seed, target):
    c = Counter(problem, budget)
    x0 = np.random.default_rng(seed).random(problem.dim)
    try:
        while len(c.history) < budget:
            minimize(c, x0, method="Nelder-Mead", options={"maxfev": budget})
            x0 = np.random.default_rng(seed + len(c.history)).random(problem.dim)
    except StopIteration:
        pass
    return c.runs_to(target)


def overhead(d, n, reps=2):
    rng = np.random.default_rng(0)
    space = SearchSpace([f"x{i}" for i in range(d)], [[0, 1]] * d)
    s = Search(space, SearchSettings(budget=n + reps + 1, n_initial=n, progress=False))
    for p in s.ask(n):
        s.tell(p.trial, float(1 + np.sum((p.u - 0.3) ** 2) + 0.01 * rng.random()))
    times = []
    for _ in range(reps):
        t0 = time.perf_counter()
        (p,) = s.ask()
        times.append(time.perf_counter() - t0)
        s.tell(p.trial, float(1 + np.sum((p.u - 0.3) ** 2)))
    return float(np.median(times))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=5)
    ap.add_argument("--budget", type=int, default=60)
    ap.add_argument("--target", type=float, default=1.5)
    ap.add_argument("--n-cells", type=int, default=80)
    ap.add_argument("--quick", action="store_true", help="2 seeds, budget 40")
    ap.add_argument("--overhead-only", action="store_true")
    args = ap.parse_args()
    torch.set_num_threads(2)
    if not args.overhead_only:
        seeds = 2 if args.quick else args.seeds
        budget = 40 if args.quick else args.budget
        problem = make_problem(args.n_cells)
        methods = {"BO (this search)": run_bo, "Sobol random": run_sobol,
                   "differential_evolution": run_de, "Nelder-Mead": run_nm}
        res = {m: [f(problem, budget, s, args.target) for s in range(seeds)]
               for m, f in methods.items()}
        med = {m: float(np.median(v)) for m, v in res.items()}
        print(f"forward runs to reduced chi2 <= {args.target} (median of {seeds} seeds, "
              f"budget {budget}; budget + 1 = not reached)")
        for m, v in res.items():
            print(f"  {m:<24}{med[m]:>7.1f}   ratio {med[m] / med['BO (this search)']:>5.2f}"
                  f"   per seed {v}")
    print("overhead per proposal (GP fit + acquisition optimisation) [s]")
    for d in (4, 8):
        row = "  ".join(f"n={n}: {overhead(d, n):.2f}" for n in (50, 100, 200))
        print(f"  d={d}: {row}")


if __name__ == "__main__":
    main()
