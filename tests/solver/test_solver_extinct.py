"""A discharge that goes out is reported as failed, never as a usable result."""

from __future__ import annotations

from profshape.operating_point import OperatingPoint
from profshape.solver import SolverSettings, demo_device, solve
from profshape.solver.config import default_profile


def test_extinguished_discharge_is_failed_with_a_reason():
    # The demo device at 200 V and 3 mg/s xenon with the default profile cannot sustain a
    # plasma (before this check it "converged" as "oscillating" on 0.15 mA with an anode
    # efficiency of 3.9). Energy conservation: T^2 / (2 mdot P) <= 1 for any real discharge
    # (definition of anode efficiency; the jet's kinetic power cannot exceed the input).
    device = demo_device()
    point = OperatingPoint("200V", 200.0, 3.0e-6, "xenon")
    r = solve(device, point, default_profile(device), SolverSettings())
    assert r.status == "failed"
    assert not r.converged
    assert "discharge went out" in r.reason
    # the averages are kept for inspection
    assert r.globals["mass_utilization"] < 0.01
    assert len(r.cells) == SolverSettings().n_cells


def test_running_discharges_keep_their_status(demo_result):
    # the demo point burns: neither check fires (mass utilization 0.9, efficiency < 1)
    assert demo_result.status == "ok"
    assert "went out" not in demo_result.reason
