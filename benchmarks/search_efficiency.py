"""Forward runs to reach a target reduced chi-square, and the search's own overhead.

Part 1: synthetic-truth calibration with the built-in solver (demo device,
300 V point, smooth-step family, 16 synthetic LIF positions with 250 m/s
noise made by the same solver, so the noise floor is a reduced chi-square of
about 1). For each seed, the number of forward runs until the best reduced
chi-square reaches ``--target`` for: this search (default settings), scrambled
Sobol random search, scipy's ``differential_evolution`` (bounds, a population
of ``3 d``, polished with L-BFGS-B) and Nelder-Mead within the bounds
(restarted from a new random point when it converges), all at the same budget
(a method that never reaches the target counts as budget + 1). Median over
seeds, and the ratio of each method's median to this search's. The (method,
seed) runs are spread over ``--jobs`` processes.

This problem is in-sample (truth inside the family, data from the same solver
and grid) and the search's defaults were once chosen on it: its figures are a
sanity check, not a claim. ``benchmarks/recovery.py`` carries the claims (cases
no default was chosen on, Optuna's samplers among the baselines).

Part 2: the search's own time per proposal (model fits plus acquisition
optimisation) at 50, 100 and 200 finished trials for d = 4 and 8, as in a
running search: the previous proposal's fit exists (warm start), one new trial
is told between proposals; 5 proposals are timed, their median and maximum
printed. With the default (composite) strategy the problem is a calibration
(two operating points, 16 LIF positions each with a position uncertainty, so
64 emulated outputs) with a cheap analytic forward model (``smooth_step`` for
d = 4, a 8-node ``log_spline`` for d = 8); ``--overhead-strategy trust_region``
times the scalar GP on the same problem. Wall-clock and the process's CPU time
are printed; on a machine shared with other work the wall-clock is the CPU
time plus the time waiting for a core.

Usage::

    python benchmarks/search_efficiency.py [--seeds 5] [--budget 60] [--jobs 2]
    python benchmarks/search_efficiency.py --quick         # 2 seeds, budget 40
    python benchmarks/search_efficiency.py --overhead-only
    python benchmarks/search_efficiency.py --quick --strategies --no-overhead
    python benchmarks/search_efficiency.py --seeds 3 --budget 120 --strategies trust_region
"""

from __future__ import annotations

import argparse
import multiprocessing
import time
from concurrent.futures import ProcessPoolExecutor

import numpy as np
from scipy import constants
from scipy.optimize import differential_evolution, minimize
from scipy.stats import qmc

from profshape import OperatingPoint
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData, load_dataset
from profshape.demo import demo_data_folder
from profshape.forward.builtin import BuiltinSolverModel
from profshape.forward.callable import CallableModel
from profshape.likelihood import LikelihoodSettings
from profshape.problem import CalibrationProblem
from profshape.search import Search, SearchSettings
from profshape.shapes import get_family
from profshape.solver import SolverSettings, demo_device, demo_operating_points

TRUTH = np.array([-2.6, -1.0, 0.026, 0.004])
_PROBLEMS: dict[tuple[int, str], CalibrationProblem] = {}


def make_problem(n_cells: int, kind: str = "synthetic") -> CalibrationProblem:
    """The synthetic-truth problem, or the bundled demo's (cached per process).

    ``kind="demo"``: the demo data set (two operating points, LIF profiles,
    discharge currents and a thrust, made on a twice finer grid) with the demo
    calibration file's 150 m/s model discrepancy.
    """
    if (n_cells, kind) in _PROBLEMS:
        return _PROBLEMS[(n_cells, kind)]
    if kind == "demo":
        family = get_family("smooth_step", channel_length_m=demo_device().channel_length_m)
        model = BuiltinSolverModel(demo_device(), SolverSettings(n_cells=n_cells))
        problem = CalibrationProblem(family, load_dataset(demo_data_folder()), model,
                                     LikelihoodSettings(discrepancy_sigma_m_s=150.0))
        _PROBLEMS[(n_cells, kind)] = problem
        return problem
    family = get_family("smooth_step", channel_length_m=0.024)
    model = BuiltinSolverModel(demo_device(), SolverSettings(n_cells=n_cells))
    point = demo_operating_points()[0]
    p = model(family.profile(TRUTH), point)
    rng = np.random.default_rng(0)
    z = np.linspace(0.008, 0.055, 16)
    sigma = np.full_like(z, 250.0)
    v = np.interp(z, p.z_m, p.ion_velocity_m_s) + sigma * rng.normal(size=z.size)
    problem = CalibrationProblem(family, DataSet([OperatingPointData(point, IonVelocityProfile(
        z, v, sigma))]), model)
    _PROBLEMS[(n_cells, kind)] = problem
    return problem


class BudgetExhausted(Exception):
    """Raised by the objective once the budget is spent (not StopIteration: ``map`` inside
    an optimiser would swallow that one silently and the optimiser would loop on)."""


class Counter:
    """Objective on the unit cube that records every forward run's reduced chi-square."""

    def __init__(self, problem, budget):
        self.problem, self.budget, self.history = problem, budget, []

    def outcome(self, u):
        if len(self.history) >= self.budget:
            raise BudgetExhausted
        out = self.problem.evaluate(self.problem.from_unit(np.clip(u, 0, 1)))
        self.history.append(out.misfit.reduced_chi2 if out.ok else np.inf)
        return out

    def __call__(self, u):
        out = self.outcome(u)
        val = out.misfit.reduced_chi2 if out.ok else np.inf
        return val if np.isfinite(val) else 1e6

    def runs_to(self, target):
        best = np.minimum.accumulate(np.array([*self.history, np.inf]))
        hit = np.flatnonzero(best <= target)
        return int(hit[0]) + 1 if hit.size else self.budget + 1


def run_bo(problem, budget, seed, target, strategy=None):
    c = Counter(problem, budget)
    extra = {} if strategy is None else {"strategy": strategy}
    s = Search(problem, SearchSettings(budget=budget, seed=seed, target_reduced_chi2=target,
                                       progress=False, **extra))
    while not s.stop_reason():
        for p in s.ask():
            out = c.outcome(p.u)
            s.tell(p.trial, out.misfit.reduced_chi2 if out.ok else None, ok=out.ok,
                   outputs=s.outputs_of(out.predictions) if out.ok else None)
    return c


def run_sobol(problem, budget, seed, target):
    c = Counter(problem, budget)
    for u in qmc.Sobol(problem.dim, seed=seed).random(budget):
        c(u)
        if c.history[-1] <= target:
            break
    return c


def run_de(problem, budget, seed, target):
    c = Counter(problem, budget)
    try:
        differential_evolution(c, [(0, 1)] * problem.dim, seed=seed, maxiter=10**6, popsize=3,
                               polish=True, tol=0, atol=0)
    except BudgetExhausted:
        pass
    return c


def run_nm(problem, budget, seed, target):
    c = Counter(problem, budget)
    x0 = np.random.default_rng(seed).random(problem.dim)
    try:
        while len(c.history) < budget:
            minimize(c, x0, method="Nelder-Mead", bounds=[(0.0, 1.0)] * problem.dim,
                     options={"maxfev": budget})
            x0 = np.random.default_rng(seed + len(c.history)).random(problem.dim)
    except BudgetExhausted:
        pass
    return c


def _bo_with(strategy):
    def run(problem, budget, seed, target):
        return run_bo(problem, budget, seed, target, strategy)
    return run


BO = "BO (this search)"
METHODS = {BO: run_bo, "Sobol random": run_sobol,
           "differential_evolution": run_de, "Nelder-Mead": run_nm}
#: The search with each proposal strategy forced (--strategies).
STRATEGY_METHODS = {f"BO strategy={k}": _bo_with(k)
                    for k in ("composite", "global", "trust_region", "hybrid")}
ALL_METHODS = {**METHODS, **STRATEGY_METHODS}


def _task(method: str, seed: int, budget: int, target: float, n_cells: int,
          kind: str = "synthetic") -> tuple[str, int, int, float, float]:
    problem = make_problem(n_cells, kind)
    t0 = time.perf_counter()
    c = ALL_METHODS[method](problem, budget, seed, target)
    finite = [v for v in c.history if np.isfinite(v)]
    return (method, seed, c.runs_to(target), min(finite) if finite else np.inf,
            time.perf_counter() - t0)


_GRID_M = np.linspace(0.0, 0.06, 121)
_XE_ION_KG = 131.293 * constants.atomic_mass - constants.m_e  # IUPAC weight, CODATA


def _ohmic(profile, point):
    """Cheap forward model: ions gain the voltage where the resistivity (~1/profile) is."""
    r = 1.0 / profile(_GRID_M)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (r[1:] + r[:-1]) * np.diff(_GRID_M))])
    drop = 0.9 * point.discharge_voltage_V * cum / cum[-1]
    return _GRID_M, np.sqrt(2 * constants.e * drop / _XE_ION_KG) + 300.0


def overhead_problem(d: int) -> CalibrationProblem:
    """A two-point calibration with 16 LIF positions per point (d = 4 or 8)."""
    family = (get_family("smooth_step", channel_length_m=0.024) if d == 4 else
              get_family("log_spline", n_nodes=d, channel_length_m=0.024))
    model = CallableModel(_ohmic, version="1", grid_m=_GRID_M)
    b = family.bounds
    truth = b[:, 0] + 0.4 * (b[:, 1] - b[:, 0])
    rng = np.random.default_rng(0)
    points = []
    for lab in ("300V", "250V"):
        op = OperatingPoint(lab, float(lab[:-1]), 4.5e-6)
        z, v = _ohmic(family.profile(truth), op)
        zm = np.linspace(0.005, 0.055, 16)
        sig = np.full(zm.size, 300.0)
        points.append(OperatingPointData(op, IonVelocityProfile(
            zm, np.interp(zm, z, v) + sig * rng.normal(size=zm.size), sig, np.full(zm.size, 3e-4))))
    return CalibrationProblem(family, DataSet(points), model)


def overhead(d: int, n: int, reps: int = 5, strategy: str = "composite"
             ) -> tuple[float, float, float, float]:
    """Median wall and CPU time of a proposal at ``n`` trials, the worst CPU and the cold one."""
    problem = overhead_problem(d)
    s = Search(problem, SearchSettings(budget=n + reps + 1, n_initial=n - 1, progress=False,
                                       strategy=strategy))

    def tell(p):
        out = problem.evaluate(p.coefficients)
        s.tell(p.trial, out.misfit.reduced_chi2 if out.ok else None, ok=out.ok,
               outputs=s.outputs_of(out.predictions) if out.ok else None)

    for p in s.ask(n - 1):
        tell(p)
    t0 = time.perf_counter()
    (p,) = s.ask()  # cold: no earlier fit to start from
    cold = time.perf_counter() - t0
    tell(p)
    wall, cpu = [], []
    for _ in range(reps):
        t0, c0 = time.perf_counter(), time.process_time()
        (p,) = s.ask()
        wall.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
        tell(p)
    return float(np.median(wall)), float(np.median(cpu)), float(np.max(cpu)), cold


def _runs(n: float, budget: int) -> str:
    """Runs to target, or ``>budget`` when not reached."""
    return f">{budget}" if n > budget else f"{n:g}"


def _ratio(num: float, den: float, capped: int) -> str:
    """``num / den`` marked as a bound when either median is capped at ``capped``."""
    if num >= capped and den >= capped:
        return "?"
    mark = ">" if num >= capped else "<" if den >= capped else ""
    return f"{mark}{num / den:.2f}"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=5)
    ap.add_argument("--budget", type=int, default=60)
    ap.add_argument("--target", type=float, default=1.5)
    ap.add_argument("--n-cells", type=int, default=80)
    ap.add_argument("--problem", choices=("synthetic", "demo"), default="synthetic",
                    help="the one-point synthetic truth, or the bundled demo data set")
    ap.add_argument("--jobs", type=int, default=2, help="processes for the (method, seed) runs")
    ap.add_argument("--quick", action="store_true", help="2 seeds, budget 40")
    ap.add_argument("--overhead-only", action="store_true")
    ap.add_argument("--strategies", nargs="*", default=None, metavar="NAME",
                    help="also run the search with each proposal strategy forced "
                    "(no names: global, trust_region and hybrid)")
    ap.add_argument("--no-overhead", action="store_true")
    ap.add_argument("--overhead-strategy", default="composite",
                    choices=("composite", "global", "trust_region", "hybrid"))
    ap.add_argument("--only", default="", help="run only methods whose name contains this")
    args = ap.parse_args()
    if not args.overhead_only:
        seeds = 2 if args.quick else args.seeds
        budget = 40 if args.quick else args.budget
        t0 = time.perf_counter()
        forced = {} if args.strategies is None else {
            k: v for k, v in STRATEGY_METHODS.items()
            if not args.strategies or k.split("=", 1)[1] in args.strategies}
        methods = {**METHODS, **forced}
        methods = {k: v for k, v in methods.items() if args.only in k or k == BO}
        jobs = [(m, s) for s in range(seeds) for m in methods]
        with ProcessPoolExecutor(args.jobs, mp_context=multiprocessing.get_context("spawn")) as ex:
            futs = [ex.submit(_task, m, s, budget, args.target, args.n_cells, args.problem)
                    for m, s in jobs]
            out = [f.result() for f in futs]
        res = {m: [r for r in out if r[0] == m] for m in methods}
        med = {m: float(np.median([r[2] for r in v])) for m, v in res.items()}
        bo = med[BO]
        best_other = min((v for m, v in med.items() if m in METHODS and m != BO),
                         default=float("nan"))
        print(f"problem: {args.problem}")
        print(f"forward runs to reduced chi2 <= {args.target} (median of {seeds} seeds, "
              f"budget {budget}, n_cells {args.n_cells}; budget + 1 = not reached)")
        print(f"  {'method':<28}{'median':>7}{'ratio':>8}   runs per seed; best reduced chi2 "
              "per seed")
        capped = budget + 1
        for m, v in res.items():
            runs = "[" + ", ".join(_runs(r[2], budget) for r in v) + "]"
            bests = " ".join(f"{r[3]:.3g}" for r in v)
            print(f"  {m:<28}{_runs(med[m], budget):>7}{_ratio(med[m], bo, capped):>8}"
                  f"   {runs}; {bests}")
        print(f"  best other / this search: {_ratio(best_other, bo, capped)}x (goal >= 3x; "
              f"'>' = a lower bound, '<' = an upper bound, '?' = both capped); "
              f"wall {time.perf_counter() - t0:.0f} s")
    if args.no_overhead:
        return
    print(f"overhead per proposal (model fits + acquisition optimisation), strategy "
          f"{args.overhead_strategy}, running search [s]")
    print("  wall / CPU (median of 5) / worst CPU of the 5, and the first (cold-start) "
          "proposal's wall")
    for d in (4, 8):
        cells = []
        for n in (50, 100, 200):
            w, c, worst, cold = overhead(d, n, strategy=args.overhead_strategy)
            cells.append(f"n={n}: {w:.2f} / {c:.2f} / {worst:.2f} (cold {cold:.2f})")
        print(f"  d={d}: " + "   ".join(cells), flush=True)


if __name__ == "__main__":
    main()
