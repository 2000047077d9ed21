"""Physics of the built-in solver on the demo case: bounds, conservation, trends."""

from __future__ import annotations

import numpy as np
import pytest

from profshape.operating_point import OperatingPoint
from profshape.propellants import get_propellant
from profshape.shapes import get_family
from profshape.solver import CELL_COLUMNS, SolverSettings, demo_device, grid, solve


def test_demo_solve_converges_and_is_finite(demo_result):
    r = demo_result
    assert r.status in ("ok", "oscillating"), r.reason
    assert r.converged and r.globals["converged"] is True
    assert list(r.cells.columns) == list(CELL_COLUMNS)
    assert np.all(np.isfinite(r.cells.to_numpy()))
    for key, value in r.globals.items():
        if isinstance(value, float):
            assert np.isfinite(value), key
    assert r.z_m == pytest.approx(grid(demo_device(), SolverSettings()))


def test_potential_boundary_values(demo_result, demo_case):
    # anode at the discharge voltage, cathode plane at 0 (half a cell away)
    phi = demo_result.cells["potential_V"].to_numpy()
    v_d = demo_case[1].discharge_voltage_V
    assert abs(phi[0] - v_d) < 0.05 * v_d
    assert abs(phi[-1]) < 0.01 * v_d


def test_ion_velocity_below_energy_bound(demo_result, demo_case):
    # energy conservation: no ion faster than sqrt(2 e V_d / M) (REFERENCES: 20,998 m/s
    # for Xe at 300 V); 1 % numerical tolerance
    v_max = get_propellant("xenon").max_ion_velocity(demo_case[1].discharge_voltage_V)
    assert v_max == pytest.approx(20998, rel=2e-4)
    assert np.max(demo_result.ion_velocity_m_s) <= 1.01 * v_max


def test_mass_conservation_at_outlet(demo_result, demo_case):
    # ion + neutral mass flow through the cathode plane within 1 % of the anode flow
    g = demo_result.globals
    assert abs(g["mass_balance_error"]) <= 0.01
    mdot = demo_case[1].anode_mass_flow_kg_s
    device = demo_case[0]
    prop = get_propellant("xenon")
    cells = demo_result.cells
    u_n = np.sqrt(8 * 1.380649e-23 * device.anode_temperature_K / (np.pi * prop.mass_kg))
    out = prop.mass_kg * device.channel_area_m2 * (
        cells["ion_current_A"].iloc[-1] / 1.602176634e-19
        / device.channel_area_m2
        + cells["neutral_density_m3"].iloc[-1] * u_n
    )
    assert out == pytest.approx(mdot, rel=0.02)  # cell-centre values, half a cell upstream


def test_independent_particle_balances(demo_result, demo_case):
    # Ions created by ionization (volume integral, accumulated on its own) must leave through
    # the anode, the cathode plane and the walls (boundary fluxes accumulated separately):
    # a real check of the discrete conservation, not an identity of the current solve.
    g = demo_result.globals
    assert abs(g["ion_balance_error"]) <= 0.01
    # time-averaged ion continuity closes in every cell (face fluxes vs sources, 2 %)
    assert g["continuity_residual"] <= 0.02
    # beam + anode + wall ion currents against the ionization current e A int S dz; the
    # discharge current is larger than the beam and smaller than the sum of the beam and
    # the electron back-streaming (common practice, no source)
    assert g["beam_current_A"] < g["discharge_current_A"]
    assert g["wall_ion_current_A"] >= 0 and g["anode_ion_current_A"] >= 0


def test_potential_and_ion_energy_bounded(demo_result, demo_case):
    # The anode fall lies between about -1 T_e and the floating-wall value
    # T_e ln sqrt(M / (2 pi m_e)) (Hobbs and Wesson 1967) and the potential nowhere exceeds
    # V_d + fall by more than the stated 2 % margin plus a 2 T_e pre-sheath; ions stay below
    # sqrt(2 e phi_max / M)
    # with M from scipy.constants (IUPAC weight 131.293, REFERENCES).
    from scipy import constants

    g = demo_result.globals
    v_d = demo_case[1].discharge_voltage_V
    te0 = demo_result.cells["electron_temperature_eV"].iloc[0]
    m = 131.293 * constants.atomic_mass - constants.m_e
    cap = np.log(np.sqrt(m / (2 * np.pi * constants.m_e)))
    # time averages of the fall and of T_e: 50 % margin on the upper end
    assert -1.05 * te0 <= g["anode_fall_V"] <= 1.5 * cap * te0
    assert g["max_potential_V"] <= v_d + max(g["anode_fall_V"], 0) + 0.02 * v_d + 2 * te0
    bound = np.sqrt(2 * constants.e * g["max_potential_V"] / m)
    assert np.max(demo_result.ion_velocity_m_s) <= 1.01 * bound
    assert g["voltage_utilization"] <= 1.0


def test_ohms_law_from_time_averaged_fields(demo_result, demo_case):
    # Independent check from the output columns: electron flux from the generalized Ohm's
    # law -mu (n E + d(n T_e)/dz), mu = (e / m nu) / (1 + Omega^2) (Goebel and Katz 2008,
    # ch. 3), plus the ion current must equal the discharge current (1 %, interior cells).
    from scipy import constants

    c = demo_result.cells
    n = c["plasma_density_m3"].to_numpy()
    z = c["z_m"].to_numpy()
    nu = c["collision_frequency_per_s"].to_numpy()
    omega = constants.e * c["magnetic_field_T"].to_numpy() / constants.m_e
    mu = constants.e / (constants.m_e * nu) / (1 + (omega / nu) ** 2)
    grad_p = np.gradient(n * c["electron_temperature_eV"].to_numpy(), z)
    flux_e = -mu * (n * c["electric_field_V_m"].to_numpy() + grad_p)
    i_e = -constants.e * demo_case[0].channel_area_m2 * flux_e
    total = i_e + c["ion_current_A"].to_numpy()
    i_d = demo_result.globals["discharge_current_A"]
    assert np.max(np.abs(total[1:-1] / i_d - 1)) < 0.01


def test_global_consistency(demo_result, demo_case):
    g = demo_result.globals
    point = demo_case[1]
    # Isp = T / (mdot g0), g0 = 9.80665 m/s^2 (CGPM 1901)
    assert g["specific_impulse_s"] == pytest.approx(
        g["thrust_N"] / (point.anode_mass_flow_kg_s * 9.80665), rel=1e-9
    )
    # anode efficiency T^2 / (2 mdot P) (definition)
    assert g["anode_efficiency"] == pytest.approx(
        g["thrust_N"] ** 2 / (2 * point.anode_mass_flow_kg_s * g["discharge_power_W"]), rel=1e-9
    )
    assert 0 < g["anode_efficiency"] < 1
    assert g["current_utilization"] == pytest.approx(
        g["beam_current_A"] / g["discharge_current_A"], rel=1e-9
    )


def test_typical_xenon_case_current(demo_result):
    # common practice, no source (REFERENCES): a discharge current of a few amperes at
    # 4.5 mg/s; most of the flow ionized
    g = demo_result.globals
    assert 0.80 <= g["mass_utilization"] <= 1.0
    assert 3.0 < g["discharge_current_A"] < 9.0
    assert 0 < g["anode_efficiency"] < 1


def test_typical_xenon_case_mass_utilization(demo_result):
    # common practice, no source (REFERENCES): mass utilization 0.8-0.95 at 300 V for a
    # kW-class xenon thruster
    assert 0.80 <= demo_result.globals["mass_utilization"] <= 0.95


@pytest.mark.xfail(strict=True, reason="known gap (issue 11): with space-charge-saturated "
                   "boron-nitride walls the Maxwellian wall losses cap T_e near 19 eV")
def test_typical_xenon_case_peak_electron_temperature(demo_result):
    # common practice, no source (REFERENCES): peak T_e 20-40 eV at 300 V
    assert 20.0 <= demo_result.globals["peak_electron_temperature_eV"] <= 40.0


@pytest.mark.xfail(strict=True, reason="known gap (issue 11): with the wall neutrals re-emitted "
                   "downstream (the default for now) the ion energy equation gives 0.62; half "
                   "upstream (wall_reemission_upstream_fraction = 0.5) gives 0.72")
def test_typical_xenon_case_voltage_utilization(demo_result):
    # common practice, no source (REFERENCES): voltage utilization 0.85-0.95 (0.7 here);
    # the exit energy comes from the ion energy equation, whose steady flux holds the
    # energy of ions born at different potentials; it cannot beat the birth potential
    g = demo_result.globals
    assert 0.70 <= g["voltage_utilization"] <= 1.0
    assert g["voltage_utilization"] <= g["ion_birth_potential_V"] / 300.0 + 0.02


def test_upstream_wall_reemission_reaches_the_voltage_utilization(demo_case):
    # common practice, no source (REFERENCES): voltage utilization 0.85-0.95 (0.7 here).
    # Diffuse re-emission sends half the wall neutrals upstream (kinetic theory): fewer ions
    # are born in the acceleration zone, so they fall through more of the potential.
    device, point, profile = demo_case
    res = solve(device, point, profile,
                SolverSettings(wall_reemission_upstream_fraction=0.5, warmup_time_s=4e-4))
    assert res.status in ("ok", "oscillating"), res.reason
    g = res.globals
    assert 0.70 <= g["voltage_utilization"] <= 1.0
    assert g["voltage_utilization"] <= g["ion_birth_potential_V"] / 300.0 + 0.02


def test_ion_energy_equation_off_gives_fluid_energy(demo_case):
    # with the energy equation off the exit energy is the fluid's M u^2 / 2 per ion, which
    # is lower (Cauchy-Schwarz: (<u^2>/<u>)^2 <= <u^3>/<u>); the dynamics are the same
    device, point, profile = demo_case
    fast = SolverSettings(n_cells=80, max_time_s=4e-4)
    on = solve(device, point, profile, fast)
    off = solve(device, point, profile, SolverSettings(n_cells=80, max_time_s=4e-4,
                                                       ion_energy_equation=0))
    assert on.converged and off.converged, (on.reason, off.reason)
    assert on.globals["discharge_current_A"] == pytest.approx(
        off.globals["discharge_current_A"], rel=1e-9)
    u = off.globals["effective_exit_velocity_m_s"]
    m = get_propellant("xenon").ion_mass_kg
    assert off.globals["exit_ion_energy_eV"] == pytest.approx(0.5 * m * u**2 / 1.602176634e-19,
                                                              rel=0.02)
    assert on.globals["exit_ion_energy_eV"] > 1.05 * off.globals["exit_ion_energy_eV"]
    e_cells = on.cells["ion_mean_energy_eV"].to_numpy()
    assert np.all(e_cells >= 0) and np.max(e_cells) <= 1.02 * on.globals["max_potential_V"]


def _half_potential_position(result, v_d):
    c = result.cells
    return float(np.interp(-0.5 * v_d, -c["potential_V"].to_numpy(), c["z_m"].to_numpy()))


def test_more_plume_transport_raises_current_and_moves_acceleration_upstream(demo_case):
    # common practice, no source: more anomalous transport in the near plume raises
    # the discharge current and pulls the acceleration region towards the anode.
    device, point, _ = demo_case
    fam = get_family("smooth_step", channel_length_m=device.channel_length_m)
    low = solve(device, point, fam.profile([-2.5, -1.0, 0.024, 0.002]))
    high = solve(device, point, fam.profile([-2.5, -0.4, 0.024, 0.002]))
    assert low.converged and high.converged, (low.reason, high.reason)
    assert high.globals["discharge_current_A"] > 1.02 * low.globals["discharge_current_A"]
    z_low = _half_potential_position(low, point.discharge_voltage_V)
    z_high = _half_potential_position(high, point.discharge_voltage_V)
    assert z_high < z_low - 2e-4


def test_grid_convergence(demo_case, demo_result):
    # exit ion velocity and discharge current change by < 2 % from N to 2N cells
    device, point, profile = demo_case
    n = SolverSettings().n_cells
    fine = solve(device, point, profile, SolverSettings(n_cells=2 * n))
    assert fine.converged, fine.reason
    for key in ("exit_ion_velocity_m_s", "discharge_current_A"):
        a, b = demo_result.globals[key], fine.globals[key]
        assert abs(b - a) / abs(b) < 0.02, (key, a, b)


def test_krypton_case_is_faster_than_xenon_and_bounded():
    # energy conservation: the lighter ion leaves faster at the same voltage and flow, and
    # stays below sqrt(2 e phi_max / M) (Kr 26,284 m/s at 300 V, REFERENCES)
    device = demo_device()
    fam = get_family("smooth_step", channel_length_m=device.channel_length_m)
    prof = fam.profile([-2.5, -1.0, 0.024, 0.002])
    kr = solve(device, OperatingPoint("Kr300", 300.0, 3.0e-6, "krypton"), prof)
    xe = solve(device, OperatingPoint("Xe300", 300.0, 3.0e-6, "xenon"), prof)
    assert kr.status in ("ok", "oscillating", "not_converged"), kr.reason
    assert xe.status in ("ok", "oscillating", "not_converged"), xe.reason
    v_max = get_propellant("krypton").max_ion_velocity(300.0)
    assert v_max == pytest.approx(26284, rel=2e-4)
    phi = max(300.0, kr.globals["max_potential_V"])
    assert np.max(kr.ion_velocity_m_s) <= 1.01 * v_max * np.sqrt(phi / 300.0)
    assert kr.globals["exit_ion_velocity_m_s"] > xe.globals["exit_ion_velocity_m_s"]


def test_oscillation_outputs_present(demo_result):
    g = demo_result.globals
    assert g["oscillation_amplitude_A"] >= 0
    assert g["oscillation_frequency_Hz"] >= 0
    h = demo_result.history
    assert h["time_s"].shape == h["discharge_current_A"].shape
    assert np.mean(h["discharge_current_A"]) == pytest.approx(
        g["discharge_current_A"], rel=0.02
    )
