"""Wall physics, ion-neutral collisions and background-gas ingestion: closed forms."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants, integrate

from profshape.exceptions import InputDataError
from profshape.operating_point import OperatingPoint
from profshape.solver import SolverSettings, demo_device, solve
from profshape.solver.config import default_profile, settings_from_mapping
from profshape.solver.ion_neutral import charge_exchange_cross_section, langevin_rate
from profshape.solver.walls import (
    WALL_YIELD_FITS,
    bohm_wall_flux,
    floating_sheath_potential,
    saturated_yield,
    secondary_yield,
)

M_XE = 131.293 * constants.atomic_mass  # IUPAC standard atomic weight, CODATA constant


def test_saturated_yield_is_hobbs_wesson_value():
    # Hobbs and Wesson 1967: sigma* = 1 - 8.3 sqrt(m_e / M), about 0.983 for xenon
    assert saturated_yield(M_XE) == pytest.approx(1 - 8.3 * np.sqrt(constants.m_e / M_XE))
    assert saturated_yield(M_XE) == pytest.approx(0.983, abs=1e-3)


@pytest.mark.parametrize("material", sorted(WALL_YIELD_FITS))
@pytest.mark.parametrize("t_ev", [2.0, 6.0, 12.0])
def test_maxwellian_flux_average_of_power_law_yield(material, t_ev):
    # The flux of a Maxwellian onto a wall is distributed as E exp(-E/T) / T^2; averaging
    # a E^b over it by quadrature (scipy) must give the closed form Gamma(2 + b) a T^b.
    a, b = WALL_YIELD_FITS[material]
    num, _ = integrate.quad(lambda e: a * e**b * e * np.exp(-e / t_ev) / t_ev**2, 0, np.inf)
    got = secondary_yield(material, t_ev, M_XE)
    assert got == pytest.approx(min(num, saturated_yield(M_XE)), rel=1e-6)


def test_yield_rises_with_temperature_and_saturates():
    t = np.array([2.0, 5.0, 10.0, 40.0, 100.0])
    s = secondary_yield("boron_nitride", t, M_XE)
    assert np.all(np.diff(s) >= 0) and s[-1] == pytest.approx(saturated_yield(M_XE))
    assert secondary_yield("constant", t, M_XE, constant_yield=0.3) == pytest.approx(0.3)
    with pytest.raises(InputDataError, match="wall_material"):
        secondary_yield("cardboard", 5.0, M_XE)


def test_floating_potential_without_emission_and_bohm_flux():
    # no emission: phi_s = T_e ln sqrt(M / (2 pi m_e)), about 5.3 T_e for xenon (textbook)
    assert floating_sheath_potential(10.0, 0.0, M_XE) / 10.0 == pytest.approx(
        0.5 * np.log(M_XE / (2 * np.pi * constants.m_e)), rel=1e-12
    )
    assert floating_sheath_potential(10.0, 0.0, M_XE) / 10.0 == pytest.approx(5.3, abs=0.05)
    # Bohm flux with the pre-sheath density exp(-1/2) n (closed form)
    assert bohm_wall_flux(1e18, 20.0, M_XE) == pytest.approx(
        np.exp(-0.5) * 1e18 * np.sqrt(constants.e * 20.0 / M_XE)
    )


def test_charge_exchange_and_langevin_magnitudes():
    # Miller et al. 2002 report about 55e-20 m^2 for Xe+ + Xe near 300 eV (from memory)
    assert charge_exchange_cross_section("xenon", 300.0) == pytest.approx(55e-20, rel=0.15)
    # falls with energy (resonant charge exchange, Rapp and Francis 1962)
    s = charge_exchange_cross_section("xenon", np.array([1.0, 10.0, 100.0, 1000.0]))
    assert np.all(np.diff(s) < 0)
    # Langevin rate in the equivalent form sqrt(pi alpha e^2 / (eps0 mu)), mu = M / 2,
    # alpha(Xe) = 4.044e-30 m^3 (CRC Handbook, from memory): about 5.8e-16 m^3/s
    ref = math.sqrt(math.pi * 4.044e-30 * constants.e**2 / (constants.epsilon_0 * M_XE / 2))
    assert langevin_rate("xenon") == pytest.approx(ref, rel=1e-9)
    assert 1e-16 < langevin_rate("krypton") < langevin_rate("xenon") * 1.2


def test_background_pressure_validation_names_field_value_and_fix():
    with pytest.raises(InputDataError, match=r"background_pressure_Pa.*-0\.001.*pascal"):
        OperatingPoint("p", 300.0, 4.5e-6, background_pressure_Pa=-1e-3)
    with pytest.raises(InputDataError, match="background_temperature_K"):
        OperatingPoint("p", 300.0, 4.5e-6, background_pressure_Pa=1e-3,
                       background_temperature_K=0.0)
    p = OperatingPoint("p", 300.0, 4.5e-6)
    assert p.background_pressure_Pa == 0.0 and p.background_density_m3 == 0.0
    with pytest.raises(InputDataError, match="wall_material"):
        SolverSettings(wall_material="paper")
    assert settings_from_mapping({"wall_material": "alumina"}).wall_material == "alumina"


COARSE = SolverSettings(n_cells=80)


def test_background_gas_is_ingested_at_the_free_molecular_rate_and_raises_current():
    # Hertz-Knudsen: a gas at pressure p and temperature T crosses a plane of area A at
    # p A sqrt(M / (2 pi k T)) kg/s (equivalently n sqrt(kT / (2 pi M)) per unit area)
    device = demo_device()
    profile = default_profile(device)
    space = solve(device, OperatingPoint("s", 300.0, 4.5e-6), profile, COARSE)
    tank = solve(device, OperatingPoint("t", 300.0, 4.5e-6, background_pressure_Pa=3e-2,
                                        background_temperature_K=300.0), profile, COARSE)
    assert space.converged and tank.converged, (space.reason, tank.reason)
    ref = 3e-2 * device.channel_area_m2 * np.sqrt(M_XE / (2 * np.pi * constants.k * 300.0))
    assert tank.globals["ingested_mass_flow_kg_s"] == pytest.approx(ref, rel=1e-6)
    assert space.globals["ingested_mass_flow_kg_s"] == 0.0
    # more neutrals to ionize (5 % more gas): the discharge current rises by more than the
    # convergence tolerance (ground-test trend, common practice, no source), and the
    # heavy-particle balance still closes (1 %)
    assert tank.globals["discharge_current_A"] > 1.008 * space.globals["discharge_current_A"]
    assert abs(tank.globals["mass_balance_error"]) <= 0.01


def test_oscillation_statistics_of_a_sine_history():
    # closed forms for I(t) = I0 + A sin(2 pi f t): rms A / sqrt(2), peak to peak 2 A,
    # dominant frequency f; periods counted between the first and last upward crossing
    # (whole periods only, so at most one or two short of the 40 in the history)
    from profshape.solver.model import _periods

    dt, f, amp = 1e-7, 2.0e4, 0.3
    t = np.arange(20000) * dt  # 2 ms: 40 periods
    rms, p2p, freq, periods = _periods(5.0 + amp * np.sin(2 * np.pi * f * t), dt)
    assert rms == pytest.approx(amp / np.sqrt(2), rel=1e-3)
    assert p2p == pytest.approx(2 * amp, rel=1e-3)
    assert freq == pytest.approx(f, rel=0.01)
    assert 38 <= periods <= 40
    # quiescent history (rms below 1 % of the mean): no frequency, no periods
    assert _periods(5.0 + 0.01 * np.sin(2 * np.pi * f * t), dt)[2:] == (0.0, 0.0)
