"""BuiltinSolverModel: globals as scalars, statuses passed through, a synthetic-truth fit."""

from __future__ import annotations

import numpy as np
import pytest
import torch

from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.executors import InlineExecutor
from profshape.forward.builtin import BuiltinSolverModel
from profshape.problem import CalibrationProblem
from profshape.search import SearchSettings, run_search
from profshape.shapes import CustomFamily, get_family
from profshape.solver import SolverSettings, demo_device, demo_operating_points

torch.set_num_threads(1)
FAST = SolverSettings(n_cells=80)
TRUTH = np.array([-2.6, -1.0, 0.026, 0.004])


def test_prediction_carries_solver_globals():
    family = get_family("smooth_step", channel_length_m=0.024)
    point = demo_operating_points()[0]
    p = BuiltinSolverModel(demo_device(), FAST)(family.profile(TRUTH), point)
    assert p.ok, p.reason
    assert p.z_m.size == 80 and {"discharge_current", "thrust"} <= set(p.scalars)
    # specific impulse = thrust / (mdot g0), g0 = 9.80665 m/s^2 (CGPM 1901)
    assert p.scalars["specific_impulse"] == pytest.approx(
        p.scalars["thrust"] / (point.anode_mass_flow_kg_s * 9.80665), rel=1e-6)


def test_not_converged_passes_through_with_reason():
    family = get_family("smooth_step", channel_length_m=0.024)
    short = SolverSettings(n_cells=80, min_time_s=2e-5, window_s=1e-5, max_time_s=4e-5)
    p = BuiltinSolverModel(demo_device(), short)(family.profile(TRUTH),
                                                 demo_operating_points()[0])
    assert p.status in ("not_converged", "failed") and p.reason.startswith("solver:")


def _step2(c, z):
    """Smooth step with the inner level fixed: log10 outer level and transition position."""
    return 10.0 ** (-2.6 + (c[0] + 2.6) / (1.0 + np.exp(-(z - c[1]) / 0.004)))


def test_synthetic_truth_recovered(tmp_path):
    check_synthetic_truth(tmp_path, seed=0)


def check_synthetic_truth(tmp_path, seed=0, truth_z_m=0.022, target=0.05):
    """A noise-free two-coefficient truth recovered in 20 runs (also run over seeds 0-9 by
    ``tests/search/sweep_seeds.py``)."""
    family = CustomFamily(_step2, {"log10_outer_level": (-2.0, 0.0),
                                   "transition_z_m": (0.015, 0.035)})
    # The truth sits 4 mm of transition position (0.4 decades of outer level) away from
    # a bistability of the solver at this grid: for transitions beyond about
    # 26.5 mm at this outer level the solver settles on a second, slower branch (exit
    # velocity about 16 instead of 20 km/s). A truth on that edge (0.026 m, as this
    # test once had) makes the misfit a cliff whose side a run falls on depends on
    # floating-point details, i.e. on the machine (issue 16).
    truth_c = np.array([-1.0, truth_z_m])
    model = BuiltinSolverModel(demo_device(), FAST)
    point = demo_operating_points()[0]
    truth = model(family.profile(truth_c), point)
    assert truth.ok, truth.reason
    z = np.linspace(0.008, 0.055, 16)
    sigma = np.full_like(z, 250.0)
    v = np.interp(z, truth.z_m, truth.ion_velocity_m_s)  # noise-free synthetic data
    data = DataSet([OperatingPointData(point, IonVelocityProfile(z, v, sigma))])
    problem = CalibrationProblem(family, data, model)
    settings = SearchSettings(budget=20, seed=seed, num_restarts=3, raw_samples=64,
                              progress=False, target_reduced_chi2=target)
    res = run_search(problem, settings, tmp_path / "trials.parquet", InlineExecutor())
    best = res.best_coefficients
    assert res.best_reduced_chi2 < 3.0
    # the transition position is what the ion velocity pins down best: within 2 mm
    ok = res.trials[res.trials["status"] == "ok"]
    # spread of the coefficients over the trials within chi2_min + 1 of the best
    # (the 68 % region of one parameter, Wilks; Press et al., Numerical Recipes, 15.6),
    # at least 5 % of the bound range (common practice, no source)
    near = ok[ok["chi2"] <= ok["chi2"].min() + 1.0]
    margins = {}
    for name, true in zip(family.names, truth_c):
        half = max(near[name].max() - near[name].min(), 0.05 * np.ptp(family.bounds[
            family.names.index(name)]))
        assert abs(best[name] - true) <= half, (name, best[name], true, half)
        margins[name] = abs(best[name] - true) / half  # 1 = on the tolerance
    return res, margins
