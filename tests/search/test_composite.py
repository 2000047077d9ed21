"""Composite strategy: emulated outputs, MC expected improvement of the chi-square, basins, bounds."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import torch

from profshape import OperatingPoint
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.exceptions import BoundWarning
from profshape.forward.callable import CallableModel
from profshape.problem import CalibrationProblem
from profshape.search import Search, SearchSettings, SearchSpace, run_search
from profshape.search.bounds import bound_hits, bound_message
from profshape.search.composite import COMPOSITE, EXPLORE, EXPLORE_DISTANCE, stall_length
from profshape.shapes import CustomFamily

FAST = dict(num_restarts=2, raw_samples=64, mc_samples=64, progress=False)


def _drive(problem, settings, tell_outputs=True):
    s = Search(problem, settings)
    while not s.stop_reason():
        for p in s.ask():
            out = problem.evaluate(p.coefficients)
            s.tell(p.trial, out.misfit.reduced_chi2 if out.ok else None, ok=out.ok,
                   outputs=s.outputs_of(out.predictions) if tell_outputs and out.ok else None)
    return s


def test_composite_is_the_default_and_uses_the_outputs(problem):
    assert SearchSettings(budget=3).strategy == COMPOSITE
    s = _drive(problem, SearchSettings(budget=8, n_initial=5, seed=0, **FAST))
    kinds = [s.kind_of(o.trial) for o in s.observations if o.source == "proposal"]
    assert kinds and set(kinds) <= {COMPOSITE, EXPLORE}
    assert s.emulator_ is not None and s.layout.n_outputs == s.emulator_.n_outputs
    # the incumbent's chi-square recomputed from its outputs is the logged value
    best = s.best()
    chi2 = float(s.layout.chi2(best.outputs)) / s.layout.dof()
    assert chi2 == pytest.approx(best.value, rel=1e-10)
    # the acquisition is a log expected improvement on (b, 1, d) points
    vals = s.acquisition_(torch.rand(5, 1, problem.dim, dtype=torch.float64))
    assert vals.shape == (5,) and torch.all(torch.isfinite(vals) | (vals == -torch.inf))
    mean, std = s.predict(np.array([best.u]))
    assert abs(mean[0] - np.log(best.value)) < 1.0 and std[0] >= 0


def test_without_outputs_the_scalar_strategy_proposes(problem):
    s = _drive(problem, SearchSettings(budget=8, n_initial=5, seed=0, **FAST), tell_outputs=False)
    assert s.emulator_ is None
    assert {s.kind_of(o.trial) for o in s.observations if o.source == "proposal"} <= {
        "global", "trust_region"}


def test_stagnation_brings_a_proposal_far_from_the_best(problem):
    s = Search(problem, SearchSettings(budget=40, n_initial=5, seed=1, **FAST))
    stall = stall_length(problem.dim)
    # drive by hand: the first trial stays best (a flat, high misfit elsewhere)
    first = None
    while len(s.observations) < 5 + stall + 1:
        for p in s.ask():
            out = problem.evaluate(p.coefficients)
            first = first or p.trial
            value = 1.0 if p.trial == first else 50.0
            s.tell(p.trial, value if out.ok else None, ok=out.ok,
                   outputs=s.outputs_of(out.predictions) if out.ok else None)
    kinds = [s.kind_of(o.trial) for o in s.observations if o.source == "proposal"]
    assert kinds[:stall] == [COMPOSITE] * stall and kinds[stall] == EXPLORE
    far = s.observations[5 + stall].u
    assert np.linalg.norm(far - s.best().u) >= EXPLORE_DISTANCE * np.sqrt(problem.dim) - 1e-12


def test_feasibility_hyperparameters_refit_only_on_a_new_failure(problem):
    s = Search(problem, SearchSettings(budget=14, n_initial=6, seed=3, **FAST))
    for p in s.ask(6):
        out = problem.evaluate(p.coefficients)
        s.tell(p.trial, out.misfit.reduced_chi2 if out.ok else None, ok=out.ok,
               outputs=s.outputs_of(out.predictions) if out.ok else None)
    assert s.n_failed >= 1  # the toy model fails for wide transitions
    snapshots = []
    for _ in range(3):
        (p,) = s.ask()
        snapshots.append((s.n_failed, s.warm_start()["feasibility"]))
        s.tell(p.trial, 1.0 + p.trial, outputs=s.outputs_of(
            problem.evaluate(p.coefficients).predictions))  # successes only
    for (n0, h0), (n1, h1) in itertools.pairwise(snapshots):
        assert n0 == n1 and h0 == h1  # conditioned on new trials, not re-optimised


def test_bound_hits_name_the_bound_and_block_early_stops():
    names, bounds = ["a", "b", "c"], np.array([[0.0, 1.0], [-2.0, 2.0], [5.0, 6.0]])
    hits = bound_hits([0.004, 0.5, 0.995], names, bounds)
    assert [(h.name, h.side) for h in hits] == [("a", "lower"), ("c", "upper")]
    assert hits[1].bound == 6.0 and "raise it" in bound_message(hits)
    assert bound_hits([0.02, 0.5, 0.98], names, bounds) == []
    # a target met on a bound does not stop the search early; the budget still does
    space = SearchSpace(["x"], [[0.0, 1.0]])
    s = Search(space, SearchSettings(budget=8, n_initial=3, target_reduced_chi2=2.0,
                                     initial_points=[{"x": 0.0}], objective_transform="log",
                                     **FAST))
    while not s.stop_reason():
        for p in s.ask():
            s.tell(p.trial, 1.0 + 0.1 * p.u[0])  # best at the lower bound, always below 2
    assert s.on_bounds() and s.on_bounds()[0].side == "lower"
    assert s.stop_reason() == "budget" and s.n_finished == 8


def _step1(c, z):
    """Smooth step with fixed inner level and transition: only the log10 outer level."""
    return 10.0 ** (-2.7 + (c[0] + 2.7) / (1.0 + np.exp(-(z - 0.026) / 0.004)))


def test_run_search_warns_and_returns_the_bound(tmp_path, toy):
    # noise-free data made beyond the upper bound: the misfit falls towards that bound,
    # so the best trial is the user's start on it (or within 1 % of it)
    truth = CustomFamily(_step1, {"log10_outer_level": (-2.0, 0.0)}).profile([-0.5])
    family = CustomFamily(_step1, {"log10_outer_level": (-2.0, -1.0)})
    points = []
    for lab in ("300V", "250V"):
        op = OperatingPoint(lab, float(lab[:-1]), 4.5e-6)
        z, v = toy.accel_model(truth, op)
        zm = np.linspace(0.005, 0.055, 12)
        points.append(OperatingPointData(op, IonVelocityProfile(zm, np.interp(zm, z, v),
                                                                np.full(zm.size, 300.0))))
    problem = CalibrationProblem(family, DataSet(points),
                                 CallableModel(toy.accel_model, version="1", grid_m=toy.grid_m))
    settings = SearchSettings(budget=6, n_initial=3, seed=0, target_reduced_chi2=1e-6,
                              initial_points=[{"log10_outer_level": -1.0}], **FAST)
    with pytest.warns(BoundWarning, match=r"log10_outer_level = -1 is on its upper bound -1 .*; raise it"):
        res = run_search(problem, settings, tmp_path / "t.parquet")
    assert [(h.name, h.side, h.bound) for h in res.on_bounds] == [
        ("log10_outer_level", "upper", -1.0)]
    assert res.on_bounds[0].to_dict()["unit_distance"] <= 0.01
