"""Robustness sweep: random shapes from every built-in family never raise or leak NaN.

Each family's coefficients are drawn uniformly inside its default bounds
(100 per family). The runs use a coarse grid and a short time limit to keep
the test fast; the code path is the one of a default solve (warm-up, march,
convergence test, averaging). Every run must end with status "ok", "oscillating",
"not_converged" or "failed" and a reason; an "ok" or "oscillating" result
must be finite and obey the ion energy bound (the potential stays below the
anode sheath edge's plus the 2 % margin and a 2 T_e pre-sheath; ions below
sqrt(2 e phi_max / M); exit energy below e (V_d + anode fall)).
"""

from __future__ import annotations

import numpy as np
import pytest

from profshape.propellants import get_propellant
from profshape.shapes import get_family
from profshape.solver import SolverSettings, demo_device, demo_operating_points, solve
from profshape.solver.config import default_profile

N_SHAPES = 100
SWEEP = SolverSettings(
    n_cells=40, window_s=4e-5, min_time_s=0.0, max_time_s=2.4e-4, warmup_time_s=8e-5,
    warmup_coarsening=2,
)


def _families():
    device = demo_device()
    length = device.channel_length_m
    return {
        "smooth_step": get_family("smooth_step", channel_length_m=length),
        "log_spline": get_family("log_spline", channel_length_m=length),
        "log_well": get_family("log_well", channel_length_m=length),
        "scaled_reference": get_family(
            "scaled_reference", reference=default_profile(device).function
        ),
        # absolute anomalous frequency [1/s] instead of a Bohm-like coefficient
        "smooth_step_frequency": get_family(
            "smooth_step", channel_length_m=length, kind="frequency"
        ),
    }


@pytest.mark.parametrize(
    "name", ["smooth_step", "log_spline", "log_well", "scaled_reference", "smooth_step_frequency"]
)
def test_random_shapes_never_raise_or_return_nan(name):
    family = _families()[name]
    device = demo_device()
    point = demo_operating_points()[0]
    v_max = get_propellant(point.propellant).max_ion_velocity(point.discharge_voltage_V)
    rng = np.random.default_rng(20261201)
    counts = {"ok": 0, "oscillating": 0, "not_converged": 0, "failed": 0}
    for _ in range(N_SHAPES):
        coeffs = family.from_unit(rng.random(family.n_coefficients))
        result = solve(device, point, family.profile(coeffs), SWEEP)
        assert result.status in counts
        counts[result.status] += 1
        assert result.reason, "every run states a reason"
        assert result.converged == (result.status in ("ok", "oscillating"))
        if result.status != "failed":
            values = result.cells.to_numpy()
            assert np.all(np.isfinite(values)), (coeffs, result.reason)
            for key, value in result.globals.items():
                if isinstance(value, float):
                    assert np.isfinite(value), (key, coeffs)
        if result.status in ("ok", "oscillating"):
            # energy conservation: ions gain at most the potential of the anode sheath edge,
            # V_d + anode fall (the fall is at most the floating value, a few T_e); the
            # solver itself refuses "ok" beyond a 2 % margin, checked here from the cells
            v_d = point.discharge_voltage_V
            edge = v_d + max(result.globals["anode_fall_V"], 0.0)
            phi_max = float(result.cells["potential_V"].max())
            te0 = float(result.cells["electron_temperature_eV"].iloc[0])
            assert phi_max <= edge + 0.02 * v_d + 2 * te0, (coeffs, phi_max, edge)
            assert result.globals["exit_ion_energy_eV"] <= 1.02 * edge
            bound = v_max * np.sqrt(max(edge, phi_max) / v_d)
            assert np.max(result.ion_velocity_m_s) <= 1.02 * bound, coeffs
            if result.status == "ok":  # quiescent: current rms below 1 %
                assert result.globals["oscillation_relative_amplitude"] <= 0.01
            else:  # oscillating: averaged over at least min_oscillation_periods periods
                assert result.globals["oscillation_periods"] >= 5
    print(name, counts)


# corners of the issue-11 ranges (voltage 150-600 V, flow 2-8 mg/s, Xe and Kr, uniform
# coefficient 1e-4 to 1, 160-640 cells); the full product is benchmarks/solver_sweep.py
CORNERS = [
    ("xenon", 150.0, 2e-6, 1.0, 160),
    ("xenon", 600.0, 8e-6, 1e-4, 160),
    ("krypton", 150.0, 8e-6, 1e-4, 160),
    ("krypton", 600.0, 2e-6, 1.0 / 16.0, 320),
    ("xenon", 300.0, 4.5e-6, 1e-2, 640),
]


@pytest.mark.slow
@pytest.mark.parametrize(("prop", "v_d", "mdot", "coef", "n"), CORNERS)
def test_sweep_corners_end_with_status_reason_and_bound(prop, v_d, mdot, coef, n):
    from profshape.operating_point import OperatingPoint
    from profshape.profile import AnomalousProfile

    point = OperatingPoint("c", v_d, mdot, prop)
    profile = AnomalousProfile("bohm", lambda z: np.full_like(z, coef))
    r = solve(demo_device(), point, profile, SolverSettings(n_cells=n, max_time_s=6e-4))
    assert r.status in ("ok", "oscillating", "not_converged", "failed")
    assert r.reason
    if r.converged:
        g = r.globals
        edge = v_d + max(g["anode_fall_V"], 0.0)
        phi = float(r.cells["potential_V"].max())
        te0 = float(r.cells["electron_temperature_eV"].iloc[0])
        assert phi <= edge + 0.02 * v_d + 2 * te0  # 2 % margin plus a 2 T_e pre-sheath
        assert g["exit_ion_energy_eV"] <= 1.02 * edge
        v_max = get_propellant(prop).max_ion_velocity(max(edge, phi))  # sqrt(2 e V / M)
        assert np.max(r.ion_velocity_m_s) <= 1.02 * v_max
        if r.status == "ok":
            assert g["oscillation_relative_amplitude"] <= 0.01
        else:
            assert g["oscillation_periods"] >= 5
