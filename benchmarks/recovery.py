"""Recovery of synthetic truths: does the search find the right basin within its default budget?

Cases no test or default was tuned on: three invented devices (a kW-class xenon
device near 300 V, a small krypton device, a high-voltage xenon device), truths
inside and outside the fitted family (steps, wells, bumps, spline shapes), one to
three operating points, synthetic LIF data with a few hundred m/s of noise and
0.3 mm of position uncertainty (the positions reported are the nominal ones, the
model was sampled at positions jittered by that much). Two forward models:

* the built-in solver on a coarse grid (``--n-cells``, 60 by default);
* a cheap stand-in with other physics (``StandIn``): the anomalous Bohm-like
  coefficient ``c(z)`` sets the cross-field mobility ``mu ~ c / B`` (the
  strongly magnetised limit of the classical form with ``nu = c e B / m_e``),
  the electron current is carried by Ohm's law ``E = j_e / (e n mu)``, the ion
  density follows from ion continuity ``n = Gamma / v`` and the ion velocity from
  energy conservation ``v = sqrt(v_0^2 + 2 e (V - phi) / M)``; the electron current
  is chosen (by bisection) so that the potential falls by a fixed fraction of the
  discharge voltage between anode and cathode plane. It predicts the ion
  velocity and a discharge current (beam current plus that electron current).

For each case and seed every method gets the same budget (40 trials for d <= 5,
else 10 d) and the same starting information (the search's scrambled Sobol
initial design of 2 d + 1 points, given to the others as their first trials or
initial population): the search with its default settings (``composite``), the
previous default (``trust_region``: a GP of the scalar misfit in a trust region),
Optuna's TPE and GP samplers, scipy's differential evolution (population = the
initial design, bounds, polish with L-BFGS-B) and the scrambled Sobol sequence
itself. Success: best reduced chi-square within ``max(1.5, 1.2 x the truth's)``;
runs to success (budget + 1 = never). Medians over seeds.

Usage::

    python benchmarks/recovery.py                       # 12 cases, 3 seeds, all methods
    python benchmarks/recovery.py --quick               # 4 cases, 1 seed, composite + trust_region
    python benchmarks/recovery.py --cases A1,B2 --seeds 0,1 --methods composite,sobol
    python benchmarks/recovery.py --list                # the cases

Needs ``pip install -e ".[bench]"`` (Optuna) for the Optuna methods.
"""

from __future__ import annotations

import argparse
import math
import multiprocessing
import time
import warnings
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field

import numpy as np
from scipy import constants
from scipy.optimize import differential_evolution

from profshape import OperatingPoint
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData, ScalarObservable
from profshape.forward.base import ForwardModel, Prediction
from profshape.forward.builtin import BuiltinSolverModel
from profshape.problem import CalibrationProblem
from profshape.propellants import get_propellant
from profshape.search import Search, SearchSettings
from profshape.search.design import sobol_points
from profshape.shapes import get_family
from profshape.solver import SolverSettings
from profshape.solver.device import Device
from profshape.solver.magnetic import BellField

# ------------------------------------------------------------------ devices (invented)
DEVICES = {
    # kW-class xenon device near 300 V
    "A": Device(channel_length_m=0.030, inner_radius_m=0.040, outer_radius_m=0.056,
                domain_length_m=0.075,
                magnetic_field=BellField(peak_T=0.020, peak_z_m=0.030, width_upstream_m=0.013,
                                         width_downstream_m=0.016),
                anode_temperature_K=600.0, cathode_electron_temperature_eV=2.5, name="Larch-5"),
    # small krypton device
    "B": Device(channel_length_m=0.016, inner_radius_m=0.014, outer_radius_m=0.022,
                domain_length_m=0.040,
                magnetic_field=BellField(peak_T=0.026, peak_z_m=0.016, width_upstream_m=0.007,
                                         width_downstream_m=0.009),
                anode_temperature_K=450.0, cathode_electron_temperature_eV=3.0, name="Wren-1"),
    # high-voltage xenon device
    "C": Device(channel_length_m=0.028, inner_radius_m=0.036, outer_radius_m=0.050,
                domain_length_m=0.070,
                magnetic_field=BellField(peak_T=0.024, peak_z_m=0.028, width_upstream_m=0.012,
                                         width_downstream_m=0.015),
                anode_temperature_K=600.0, cathode_electron_temperature_eV=3.5, name="Basalt-9"),
}
POINTS = {
    "A": [OperatingPoint("300V", 300.0, 6.0e-6, "xenon"), OperatingPoint("250V", 250.0, 6.0e-6,
          "xenon"), OperatingPoint("350V", 350.0, 6.0e-6, "xenon")],
    "B": [OperatingPoint("250V", 250.0, 1.2e-6, "krypton"), OperatingPoint("300V", 300.0, 1.2e-6,
          "krypton"), OperatingPoint("200V", 200.0, 1.2e-6, "krypton")],
    "C": [OperatingPoint("600V", 600.0, 5.0e-6, "xenon"), OperatingPoint("500V", 500.0, 5.0e-6,
          "xenon"), OperatingPoint("700V", 700.0, 5.0e-6, "xenon")],
}


class StandIn(ForwardModel):
    """Cheap analytic stand-in (see the module docstring); picklable."""

    name = "ohmic-stand-in"
    version = "1"

    def __init__(self, device: Device, n_grid: int = 240, drop_fraction: float = 0.92) -> None:
        self.device = device
        self.z = np.linspace(0.0, device.domain_length_m, n_grid)
        self.drop_fraction = drop_fraction

    def grid(self, point):
        return self.z

    def _march(self, a: float, coef: np.ndarray, b: np.ndarray, v0: float, gamma: float,
               volt: float, m_ion: float) -> tuple[np.ndarray, np.ndarray]:
        dz = np.diff(self.z)
        drop = np.zeros_like(self.z)
        v = np.empty_like(self.z)
        v[0] = v0
        for i in range(len(dz)):
            # E = j_e / (e n mu), n = Gamma / v, mu ~ coef / B  ->  E = a * B * v / coef
            e_field = a * b[i] * v[i] / coef[i]
            drop[i + 1] = min(drop[i] + e_field * dz[i], volt)
            v[i + 1] = math.sqrt(v0**2 + 2 * constants.e * drop[i + 1] / m_ion)
        return drop, v

    def run(self, profile, point) -> Prediction:
        prop = get_propellant(point.propellant)
        m_ion = prop.ion_mass_kg
        volt = point.discharge_voltage_V
        coef = np.maximum(np.asarray(profile(self.z), dtype=float), 1e-8)
        b = self.device.magnetic_field(self.z) * point.magnetic_field_scale
        v0 = 300.0
        gamma = point.anode_mass_flow_kg_s / prop.mass_kg
        target = self.drop_fraction * volt
        lo, hi = 1e-6, 1e12  # bisection in log of the current-like factor
        for _ in range(60):
            mid = math.sqrt(lo * hi)
            drop, _ = self._march(mid, coef, b, v0, gamma, volt, m_ion)
            if drop[-1] < target:
                lo = mid
            else:
                hi = mid
            if hi / lo < 1 + 1e-7:
                break
        a = math.sqrt(lo * hi)
        drop, v = self._march(a, coef, b, v0, gamma, volt, m_ion)
        beam = constants.e * gamma * 0.9
        # electron current proportional to a (E = j_e / (e n mu)); a = 1 gives a quarter of
        # the beam current (an invented but plausible scale)
        electron = 0.25 * beam * a
        return Prediction("ok", self.z, v, {"discharge_current": beam + electron})


# ------------------------------------------------------------------ cases
@dataclass(frozen=True)
class Case:
    """One recovery case."""

    key: str
    device: str
    family: str
    family_options: dict
    truth_family: str
    truth_options: dict
    truth_u: tuple  # truth in the unit cube of the truth family
    n_points: int
    model: str  # "solver" or "standin"
    sigma_m_s: float = 300.0
    current: bool = False
    note: str = ""
    in_family: bool = field(init=False, default=False)

    def __post_init__(self):
        object.__setattr__(self, "in_family", self.family == self.truth_family and
                           self.family_options == self.truth_options)


CASES = [
    Case("A1", "A", "smooth_step", {}, "smooth_step", {}, (0.35, 0.6, 0.45, 0.3), 1, "solver"),
    Case("A2", "A", "smooth_step", {}, "log_well", {}, (0.6, 0.55, 0.45, 0.3), 2, "standin",
         note="well truth, step family"),
    Case("A3", "A", "log_well", {}, "log_well", {}, (0.5, 0.6, 0.5, 0.35), 2, "standin", 250.0),
    Case("A4", "A", "log_spline", {"n_nodes": 5}, "log_spline", {"n_nodes": 5},
         (0.3, 0.35, 0.75, 0.55, 0.6), 3, "standin", current=True),
    Case("A5", "A", "log_well", {}, "smooth_step", {}, (0.4, 0.5, 0.4, 0.4), 1, "solver",
         note="step truth, well family"),
    Case("B1", "B", "log_well", {}, "log_well", {}, (0.45, 0.55, 0.6, 0.3), 2, "solver", 350.0),
    Case("B2", "B", "smooth_step", {}, "smooth_step", {}, (0.55, 0.4, 0.35, 0.2), 1, "standin"),
    Case("B3", "B", "smooth_step", {}, "log_well", {}, (0.6, 0.1, 0.5, 0.4), 2, "standin",
         note="bump truth, step family"),
    Case("B4", "B", "log_spline", {"n_nodes": 4}, "smooth_step", {}, (0.3, 0.5, 0.5, 0.35), 2,
         "standin", current=True, note="step truth, spline family"),
    Case("C1", "C", "smooth_step", {}, "smooth_step", {}, (0.4, 0.55, 0.5, 0.25), 2, "solver"),
    Case("C2", "C", "log_well", {}, "log_well", {}, (0.55, 0.08, 0.55, 0.3), 1, "standin",
         note="bump (negative depth)"),
    Case("C3", "C", "smooth_step", {}, "log_spline", {"n_nodes": 5},
         (0.25, 0.3, 0.8, 0.6, 0.55), 3, "standin", note="spline truth, step family"),
    Case("C4", "C", "log_spline", {"n_nodes": 6}, "log_well", {}, (0.55, 0.6, 0.5, 0.35), 2,
         "standin", note="well truth, 6-node spline family (d = 6)"),
    Case("C5", "C", "log_well", {}, "log_well", {}, (0.5, 0.45, 0.65, 0.25), 3, "standin",
         current=True),
]
#: The cases run by default (A5 and C5 are extra: --cases A5,C5).
DEFAULT_CASES = ["A1", "A2", "A3", "A4", "B1", "B2", "B3", "B4", "C1", "C2", "C3", "C4"]
CASE_BY_KEY = {c.key: c for c in CASES}

POSITION_SIGMA_M = 3e-4
_PROBLEMS: dict[tuple[str, int], tuple[CalibrationProblem, float]] = {}


def _family(device: Device, name: str, options: dict):
    return get_family(name, channel_length_m=device.channel_length_m, **options)


def make_problem(case: Case, n_cells: int) -> tuple[CalibrationProblem, float]:
    """The case's problem and the truth's reduced chi-square (cached per process)."""
    key = (case.key, n_cells)
    if key in _PROBLEMS:
        return _PROBLEMS[key]
    device = DEVICES[case.device]
    model = (BuiltinSolverModel(device, SolverSettings(n_cells=n_cells))
             if case.model == "solver" else StandIn(device))
    truth_family = _family(device, case.truth_family, case.truth_options)
    b = truth_family.bounds
    truth_c = b[:, 0] + np.asarray(case.truth_u) * (b[:, 1] - b[:, 0])
    profile = truth_family.profile(truth_c)
    rng = np.random.default_rng(sum(map(ord, case.key)))  # fixed per case
    points = []
    L = device.channel_length_m
    for op in POINTS[case.device][: case.n_points]:
        pred = model(profile, op)
        if not pred.ok:
            raise RuntimeError(f"case {case.key}: the truth does not run at {op.label}: "
                               f"{pred.reason}")
        z = np.linspace(0.3 * L, min(2.2 * L, 0.97 * device.domain_length_m), 16)
        z_true = z + POSITION_SIGMA_M * rng.normal(size=z.size)
        v = np.interp(z_true, pred.z_m, pred.ion_velocity_m_s)
        sigma = np.full(z.size, case.sigma_m_s)
        prof = IonVelocityProfile(z, v + sigma * rng.normal(size=z.size), sigma,
                                  np.full(z.size, POSITION_SIGMA_M))
        scalars = {}
        if case.current:
            cur = pred.scalars["discharge_current"]
            s = 0.03 * cur
            scalars["discharge_current"] = ScalarObservable("discharge_current",
                                                            cur + s * rng.normal(), s, "A")
        points.append(OperatingPointData(op, prof, scalars))
    family = _family(device, case.family, case.family_options)
    problem = CalibrationProblem(family, DataSet(points), model)
    # the truth's own misfit (same likelihood); for an out-of-family truth this is the
    # profile's, which the family may not reach
    from profshape.likelihood import evaluate_misfit

    preds = {op.label: model(profile, op) for op in POINTS[case.device][: case.n_points]}
    truth_rchi2 = evaluate_misfit(problem.dataset, preds, problem.likelihood).reduced_chi2
    _PROBLEMS[key] = (problem, float(truth_rchi2))
    return _PROBLEMS[key]


def budget_for(dim: int) -> int:
    """The default budget: 40 trials for d <= 5, else 10 d."""
    return 40 if dim <= 5 else 10 * dim


# ------------------------------------------------------------------ methods
class BudgetExhausted(Exception):
    """Raised by the objective once the budget is spent (not StopIteration: ``map`` inside
    an optimiser would swallow that one silently and the optimiser would loop on)."""


class Counter:
    """Objective on the unit cube recording every forward run's reduced chi-square."""

    def __init__(self, problem, budget):
        self.problem, self.budget, self.history, self.outcomes = problem, budget, [], []
        self.rows: list[dict] = []  # the trial log the posterior stage samples from

    def outcome(self, u):
        if len(self.history) >= self.budget:
            raise BudgetExhausted
        u = np.clip(np.asarray(u, dtype=float), 0, 1)
        out = self.problem.evaluate(self.problem.from_unit(u))
        self.history.append(out.misfit.reduced_chi2 if out.ok else math.inf)
        row = {f"u__{n}": float(v) for n, v in zip(self.problem.names, u)}
        row.update(status="ok" if out.ok else "failed",
                   log_likelihood=out.misfit.log_likelihood if out.ok else -math.inf,
                   chi2=out.misfit.chi2 if out.ok else math.inf,
                   reduced_chi2=out.misfit.reduced_chi2 if out.ok else math.inf)
        self.rows.append(row)
        return out

    def __call__(self, u):
        out = self.outcome(u)
        return out.misfit.reduced_chi2 if out.ok else 1e6


def _design(problem, seed):
    return sobol_points(2 * problem.dim + 1, problem.dim, seed)


def run_search(problem, budget, seed, strategy):
    c = Counter(problem, budget)
    s = Search(problem, SearchSettings(budget=budget, seed=seed, strategy=strategy,
                                       progress=False))
    while not s.stop_reason():
        for p in s.ask():
            out = c.outcome(p.u)
            s.tell(p.trial, out.misfit.reduced_chi2 if out.ok else None, ok=out.ok,
                   outputs=s.outputs_of(out.predictions) if out.ok else None)
    return c


def run_composite(problem, budget, seed):
    return run_search(problem, budget, seed, "composite")


def run_trust_region(problem, budget, seed):
    return run_search(problem, budget, seed, "trust_region")


def run_sobol(problem, budget, seed):
    c = Counter(problem, budget)
    for u in sobol_points(budget, problem.dim, seed):
        c(u)
    return c


def run_de(problem, budget, seed):
    c = Counter(problem, budget)
    try:
        differential_evolution(c, [(0.0, 1.0)] * problem.dim, init=_design(problem, seed),
                               seed=seed, maxiter=10**6, polish=True, tol=0, atol=0)
    except BudgetExhausted:
        pass
    return c


def _run_optuna(problem, budget, seed, kind):
    import optuna

    optuna.logging.set_verbosity(optuna.logging.ERROR)
    c = Counter(problem, budget)
    n0 = 2 * problem.dim + 1
    if kind == "tpe":
        sampler = optuna.samplers.TPESampler(seed=seed, n_startup_trials=n0)
    else:
        sampler = optuna.samplers.GPSampler(seed=seed, n_startup_trials=n0)
    study = optuna.create_study(sampler=sampler, direction="minimize")
    names = [f"u{i}" for i in range(problem.dim)]
    for u in _design(problem, seed):
        study.enqueue_trial(dict(zip(names, map(float, u))))

    def objective(trial):
        u = np.array([trial.suggest_float(n, 0.0, 1.0) for n in names])
        v = c(u)
        return v if v < 1e6 else float("nan")  # nan: a failed trial for Optuna

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        study.optimize(objective, n_trials=budget, catch=(BudgetExhausted,))
    return c


def run_tpe(problem, budget, seed):
    return _run_optuna(problem, budget, seed, "tpe")


def run_optuna_gp(problem, budget, seed):
    return _run_optuna(problem, budget, seed, "gp")


METHODS = {
    "composite": run_composite,
    "trust_region": run_trust_region,
    "optuna_tpe": run_tpe,
    "optuna_gp": run_optuna_gp,
    "diff_evolution": run_de,
    "sobol": run_sobol,
}


#: Central level of the profile band whose coverage of the truth is reported.
BAND_LEVEL = 0.90


def posterior_stage(case: Case, problem, rows: list[dict], seed: int) -> dict:
    """Sample the posterior from a search's trials with default settings and score it.

    Returns the fraction of positions (200 along the domain) where the truth's
    profile lies inside the posterior's 90 % pointwise band, whether the
    goodness-of-fit check of the best trial failed (the "this family or model
    cannot match the data" flag), and the forward runs the posterior stage spent.
    """
    import pandas as pd

    from profshape.posterior import PosteriorSettings, sample_posterior
    from profshape.posterior.bands import profile_band
    from profshape.posterior.verdicts import goodness_of_fit

    trials = pd.DataFrame(rows)
    ok = trials[trials["status"] == "ok"]
    best = ok.loc[ok["chi2"].idxmin()]
    dof = int(np.rint(best["chi2"] / best["reduced_chi2"])) if best["reduced_chi2"] > 0 else 1
    flagged = not goodness_of_fit(float(best["chi2"]), dof).passed
    post = sample_posterior(problem, trials, PosteriorSettings(seed=seed))
    device = DEVICES[case.device]
    z = np.linspace(0.0, device.domain_length_m, 200)
    draws = post.samples[list(problem.family.names)].to_numpy(dtype=float)
    pick = np.random.default_rng(seed).choice(len(draws), min(len(draws), 400), replace=False)
    values = np.array([problem.family.profile(c)(z) for c in draws[pick]])
    band = profile_band(np.log10(values), z, levels=(BAND_LEVEL,))
    truth_family = _family(device, case.truth_family, case.truth_options)
    b = truth_family.bounds
    truth = np.log10(truth_family.profile(b[:, 0] + np.asarray(case.truth_u)
                                          * (b[:, 1] - b[:, 0]))(z))
    lo, hi = band[f"lower_{BAND_LEVEL:g}"].to_numpy(), band[f"upper_{BAND_LEVEL:g}"].to_numpy()
    return dict(coverage90=float(np.mean((truth >= lo) & (truth <= hi))), flagged=flagged,
                posterior_runs=int(post.diagnostics.get("n_forward_runs", 0)))


def _task(key: str, method: str, seed: int, n_cells: int, posterior: bool = False) -> dict:
    import torch

    torch.set_num_threads(1)
    case = CASE_BY_KEY[key]
    problem, truth = make_problem(case, n_cells)
    budget = budget_for(problem.dim)
    target = max(1.5, 1.2 * truth)
    t0, c0 = time.perf_counter(), time.process_time()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        c = METHODS[method](problem, budget, seed)
    hist = np.array([*c.history[:budget], math.inf])
    best = np.minimum.accumulate(hist)
    hit = np.flatnonzero(best <= target)
    out = dict(case=key, method=method, seed=seed, budget=budget, target=target, truth=truth,
               best=float(best[-1]), runs=int(hit[0]) + 1 if hit.size else budget + 1,
               success=bool(hit.size), n_runs=len(c.history), wall=time.perf_counter() - t0,
               cpu=time.process_time() - c0)
    if posterior and getattr(c, "rows", None):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            out.update(posterior_stage(case, problem, c.rows, seed))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", default="", help="comma-separated case keys (default: the 12 "
                    "of DEFAULT_CASES; A5, C5 on request)")
    ap.add_argument("--seeds", default="0,1,2", help="comma-separated seeds")
    ap.add_argument("--methods", default=",".join(METHODS), help="comma-separated methods")
    ap.add_argument("--n-cells", type=int, default=60, help="solver cells (coarse grid)")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--quick", action="store_true",
                    help="cases A1, B2, C2, C4; seed 0; composite and trust_region")
    ap.add_argument("--no-posterior", action="store_true",
                    help="skip the posterior stage after the composite search (90 %% band "
                         "coverage, wrong-family flag, posterior forward runs)")
    ap.add_argument("--list", action="store_true", help="print the cases and exit")
    args = ap.parse_args()
    if args.list:
        for c in CASES:
            print(f"{c.key}: device {c.device} ({DEVICES[c.device].name}), fit {c.family} "
                  f"{c.family_options or ''}, truth {c.truth_family} {c.truth_options or ''} "
                  f"{'(in family)' if c.in_family else '(outside the family)'}, "
                  f"{c.n_points} point(s), {c.model}, sigma {c.sigma_m_s:g} m/s"
                  f"{', discharge current' if c.current else ''} {c.note}")
        return
    keys = DEFAULT_CASES if not args.cases else args.cases.split(",")
    seeds = [int(s) for s in args.seeds.split(",")]
    methods = args.methods.split(",")
    if args.quick:
        keys, seeds, methods = ["A1", "B2", "C2", "C4"], [0], ["composite", "trust_region"]
    for m in methods:
        if m not in METHODS:
            raise SystemExit(f"unknown method {m!r}; use {list(METHODS)}")
    t0 = time.perf_counter()
    jobs = [(k, m, s) for k in keys for s in seeds for m in methods]
    with ProcessPoolExecutor(args.jobs, mp_context=multiprocessing.get_context("spawn")) as ex:
        futs = [ex.submit(_task, k, m, s, args.n_cells,
                          m == "composite" and not args.no_posterior) for k, m, s in jobs]
        rows = []
        for f in futs:
            r = f.result()
            rows.append(r)
            print(f"  done {r['case']} {r['method']:<15} seed {r['seed']}: best {r['best']:.3g} "
                  f"(target {r['target']:.3g}), runs {r['runs']}, {r['cpu']:.0f} s CPU",
                  flush=True)
    print(f"\nrecovery: {len(keys)} cases, seeds {seeds}, solver n_cells {args.n_cells}, "
          f"wall {time.perf_counter() - t0:.0f} s")
    print("per case: median forward runs to success (budget + 1 = not reached) / successes "
          "over seeds / median best reduced chi-square")
    header = f"{'case':<5}{'d':>3}{'budget':>7}{'truth':>7}{'target':>7}  " + "".join(
        f"{m:>22}" for m in methods)
    print(header)
    summary = {m: {"runs": [], "succ": 0, "n": 0} for m in methods}
    for k in keys:
        case = CASE_BY_KEY[k]
        cells = []
        sub = [r for r in rows if r["case"] == k]
        r0 = sub[0]
        for m in methods:
            rr = [r for r in sub if r["method"] == m]
            med_runs = float(np.median([r["runs"] for r in rr]))
            succ = sum(r["success"] for r in rr)
            med_best = float(np.median([r["best"] for r in rr]))
            summary[m]["runs"].append(med_runs)
            summary[m]["succ"] += int(succ * 2 >= len(rr) + 1 if len(rr) > 1 else succ)
            summary[m]["n"] += 1
            cells.append(f"{med_runs:>7g} {succ}/{len(rr)} {med_best:>8.3g}")
        d = make_problem(case, args.n_cells)[0].dim
        tag = "" if case.in_family else "*"
        print(f"{k + tag:<5}{d:>3}{r0['budget']:>7}{r0['truth']:>7.2f}{r0['target']:>7.2f}  "
              + "".join(f"{c:>22}" for c in cells))
    print("(* truth outside the fitted family)")
    post_rows = [r for r in rows if "coverage90" in r]
    if post_rows:
        print(f"\nposterior stage after the composite search (default settings), medians over "
              f"seeds: fraction of positions where the truth's profile lies inside the "
              f"{BAND_LEVEL:.0%} band / seeds whose best fit was flagged 'cannot match' / "
              "forward runs of the posterior stage")
        cov_in, flag_out = [], []
        for k in keys:
            rr = [r for r in post_rows if r["case"] == k]
            if not rr:
                continue
            case = CASE_BY_KEY[k]
            cov = float(np.median([r["coverage90"] for r in rr]))
            nflag = sum(r["flagged"] for r in rr)
            runs = float(np.median([r["posterior_runs"] for r in rr]))
            (cov_in if case.in_family else flag_out).append(cov if case.in_family
                                                            else nflag == len(rr))
            print(f"  {k + ('' if case.in_family else '*'):<5} coverage {cov:5.2f}   flagged "
                  f"{nflag}/{len(rr)}   posterior runs {runs:g}")
        if cov_in:
            print(f"  mean coverage over in-family cases {np.mean(cov_in):.2f}")
        if flag_out:
            print(f"  wrong-family cases flagged on every seed: {sum(flag_out)}/{len(flag_out)}")
    print("\nover cases: cases solved (majority of seeds) / median of the per-case median runs "
          "/ mean CPU per run")
    for m in methods:
        cpu = np.mean([r["cpu"] for r in rows if r["method"] == m])
        print(f"  {m:<16} {summary[m]['succ']:>2}/{summary[m]['n']}   median runs "
              f"{np.median(summary[m]['runs']):>5g}   {cpu:.1f} s CPU per (case, seed)")


if __name__ == "__main__":
    main()
