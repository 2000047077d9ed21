"""Robustness sweep: random shapes from every built-in family never raise or leak NaN.

Each family's coefficients are drawn uniformly inside its default bounds
(100 per family). The runs use a coarse grid and a short time limit to keep
the test fast; the code path is the one of a default solve (warm-up, march,
convergence test, averaging). Every run must end with status "ok",
"not_converged" or "failed" and a reason; an "ok" result must be finite and
obey the ion energy bound (set by the largest potential drop).
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
    counts = {"ok": 0, "not_converged": 0, "failed": 0}
    for _ in range(N_SHAPES):
        coeffs = family.from_unit(rng.random(family.n_coefficients))
        result = solve(device, point, family.profile(coeffs), SWEEP)
        assert result.status in counts
        counts[result.status] += 1
        assert result.reason, "every run states a reason"
        assert result.converged == (result.status == "ok")
        if result.status != "failed":
            values = result.cells.to_numpy()
            assert np.all(np.isfinite(values)), (coeffs, result.reason)
            for key, value in result.globals.items():
                if isinstance(value, float):
                    assert np.isfinite(value), (key, coeffs)
        if result.status == "ok":
            # energy conservation: ions gain at most the largest potential drop. Without an
            # anode-sheath model the plasma next to the anode may sit a few T_e above V_d
            # (strong in-channel transport), so the bound uses max(V_d, max phi).
            phi_max = max(point.discharge_voltage_V, float(result.cells["potential_V"].max()))
            bound = v_max * np.sqrt(phi_max / point.discharge_voltage_V)
            assert np.max(result.ion_velocity_m_s) <= 1.02 * bound, coeffs
    print(name, counts)
