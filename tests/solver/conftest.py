"""Shared solver runs for the solver tests (computed once per session)."""

from __future__ import annotations

import pytest

from profshape.solver import SolverSettings, demo_device, demo_operating_points, solve
from profshape.solver.config import default_profile


@pytest.fixture(scope="session")
def demo_case():
    device = demo_device()
    return device, demo_operating_points()[0], default_profile(device)


@pytest.fixture(scope="session")
def demo_result(demo_case):
    """The demo device's 300 V point, default profile, default settings."""
    device, point, profile = demo_case
    return solve(device, point, profile, SolverSettings())
