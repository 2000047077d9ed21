"""Grid convergence of the built-in solver (Richardson, 160 / 320 / 640 cells)."""

from __future__ import annotations

import math

import pytest

from profshape.solver import SolverSettings, solve

TOL = 2e-4  # tight convergence tolerance: the statistical floor of the comparison


@pytest.mark.slow
def test_observed_grid_order_and_default_grid_error(demo_case):
    # Richardson extrapolation (L. F. Richardson 1911; Roache 1998, Verification and
    # Validation in Computational Science, ch. 5): with refinement ratio 2 the observed
    # order is p = log2(d1 / d2), d1 = f160 - f320, d2 = f320 - f640. p >= 1.6 means
    # |d2| <= |d1| / 2^1.6; each value carries the convergence tolerance as noise, so
    # the check allows that floor. A first-order scheme (d2 ~ d1 / 2) fails it.
    device, point, profile = demo_case
    runs = {}
    for n in (160, 320, 640):
        r = solve(device, point, profile, SolverSettings(
            n_cells=n, tolerance=TOL, mass_tolerance=2e-3, max_time_s=2.5e-3))
        assert r.converged, (n, r.reason)
        runs[n] = r.globals
    for key in ("discharge_current_A", "thrust_N"):
        f = {n: g[key] for n, g in runs.items()}
        d1, d2 = f[160] - f[320], f[320] - f[640]
        noise = 2 * TOL * abs(f[640])
        assert abs(d2) <= abs(d1) / 2**1.6 + noise, (key, f)
        # the default grid within 1 % of the finest (issue 11's bound for 1280 cells; the
        # 640-cell value stands in for it here, the benchmark prints the 1280-cell error)
        assert abs(f[160] - f[640]) <= 0.01 * abs(f[640]), (key, f)
        if abs(d2) > noise:
            assert math.log2(abs(d1 / d2)) >= 1.6, (key, f)
