"""Momentum bookkeeping of the built-in solver: ion momentum balance, charge-exchange thrust."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants

from profshape.solver import SolverSettings, solve


def test_ion_momentum_balance_closes(demo_result):
    # Newton's second law for the ion fluid over the averaging range (steady run): the
    # momentum flowing out through the cathode plane minus that through the anode face
    # equals the electric force plus the momentum of the newly born ions minus what the
    # walls and the neutrals take; each term is accumulated on its own in the kernel
    assert demo_result.status == "ok"
    assert abs(demo_result.globals["ion_momentum_balance_error"]) <= 0.01


def test_charge_exchange_thrust_matches_the_cross_section_integral(demo_result, demo_case):
    # Resonant charge exchange hands the ion's velocity to a fast neutral (Rapp and Francis,
    # J. Chem. Phys. 37, 2631, 1962), which leaves with the exhaust: its momentum flux is
    # M A int n_i n_n sigma_cx(E) g (u_i - u_n) dz over the downstream-moving ions, with
    # sigma_cx = (87.3 - 13.6 log10 E[eV]) 1e-20 m^2 (Miller et al., J. Appl. Phys. 91, 984,
    # 2002; from memory, tests/REFERENCES.md) and g the relative speed with the neutral
    # thermal spread. Rebuilt here from the time-averaged cells (steady run, 2 %).
    device = demo_case[0]
    c = demo_result.cells
    m = 131.293 * constants.atomic_mass  # IUPAC atomic weight (REFERENCES)
    u_n = np.sqrt(8 * constants.k * device.anode_temperature_K / (np.pi * m))
    du = c["ion_velocity_m_s"].to_numpy() - u_n
    energy = np.maximum(0.5 * m * du**2 / constants.e, 0.1)
    sigma = np.maximum((87.3 - 13.6 * np.log10(energy)) * 1e-20, 0.0)
    g = np.sqrt(du**2 + u_n**2)
    dz = np.diff(c["z_m"].to_numpy())[0]
    rate = c["neutral_density_m3"] * c["plasma_density_m3"] * sigma * g * np.maximum(du, 0.0)
    expected = m * device.channel_area_m2 * float(np.sum(rate)) * dz
    got = demo_result.globals["charge_exchange_thrust_N"]
    assert got == pytest.approx(expected, rel=0.02)
    # and it is part of the thrust, which exceeds the ion + neutral flux by exactly it
    assert 0.0 < got < demo_result.globals["thrust_N"]


def test_no_charge_exchange_thrust_without_ion_neutral_collisions(demo_case):
    device, point, profile = demo_case
    r = solve(device, point, profile, SolverSettings(n_cells=80, ion_neutral_collision_scale=0.0))
    assert r.converged, r.reason
    g = r.globals
    assert g["charge_exchange_thrust_N"] == 0.0
    assert abs(g["ion_momentum_balance_error"]) <= 0.01


def test_ion_birth_potential_matches_the_time_averaged_source(demo_result, demo_case):
    # The ionization-weighted potential accumulated step by step must agree with the one
    # rebuilt from the time-averaged cells (steady run, 1 %): n_e n_n k_iz(T_e) phi, with
    # k_iz from the solver's rate table (a consistency check of the accumulation), and it
    # lies between the cathode-plane potential (0 V) and V_d + anode fall.
    from profshape.solver.rates import ionization_rate

    c = demo_result.cells
    source = (c["plasma_density_m3"] * c["neutral_density_m3"]
              * ionization_rate("xenon", c["electron_temperature_eV"].to_numpy()))
    expected = float(np.sum(source * c["potential_V"]) / np.sum(source))
    g = demo_result.globals
    assert g["ion_birth_potential_V"] == pytest.approx(expected, rel=0.01)
    v_d = demo_case[1].discharge_voltage_V
    assert 0.0 < g["ion_birth_potential_V"] <= v_d + max(g["anode_fall_V"], 0.0) + 1e-9
