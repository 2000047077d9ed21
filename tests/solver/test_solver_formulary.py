"""Formulary helpers and constants against PlasmaPy, scipy.constants and NIST."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import constants

from profshape.propellants import get_propellant
from profshape.solver import _kernels
from profshape.solver.collisions import (
    bohm_diffusion,
    coulomb_logarithm,
    cross_field_mobility,
    electron_gyrofrequency,
    electron_ion_collision_frequency,
)

u = pytest.importorskip("astropy.units")
formulary = pytest.importorskip("plasmapy.formulary")
particles = pytest.importorskip("plasmapy.particles")

CASES = [(3.0, 1e18), (5.0, 1e17), (20.0, 5e17), (40.0, 1e18), (80.0, 3e16)]


@pytest.mark.parametrize("b_tesla", [1e-3, 0.017, 0.3])
def test_gyrofrequency_matches_plasmapy(b_tesla):
    # PlasmaPy formulary.gyrofrequency (e B / m_e, rad/s)
    ref = formulary.gyrofrequency(b_tesla * u.T, "e-").to_value(u.rad / u.s)
    assert electron_gyrofrequency(b_tesla) == pytest.approx(ref, rel=1e-9)
    # NRL Plasma Formulary: 1.76e7 B[G] rad/s = 1.7588e11 rad/s per tesla
    assert electron_gyrofrequency(1.0) == pytest.approx(1.7588e11, rel=1e-4)


@pytest.mark.parametrize(("t_ev", "n_m3"), CASES)
def test_coulomb_logarithm_close_to_plasmapy(t_ev, n_m3):
    # NRL form vs PlasmaPy's Coulomb_logarithm (classical method); the two
    # definitions differ by a few per cent, so the tolerance is 10 %.
    ref = formulary.Coulomb_logarithm(
        t_ev * u.eV, n_m3 * u.m**-3, ("e-", "p+"), z_mean=1, method="classical"
    )
    assert coulomb_logarithm(n_m3, t_ev) == pytest.approx(float(ref), rel=0.10)
    # the numba copy used in the march agrees with the numpy version exactly
    assert _kernels.coulomb_log_nrl(n_m3, t_ev) == pytest.approx(
        float(coulomb_logarithm(n_m3, t_ev)), rel=1e-12
    )


@pytest.mark.parametrize(("t_ev", "n_m3"), CASES)
def test_electron_ion_collision_frequency_matches_plasmapy(t_ev, n_m3):
    # PlasmaPy fundamental_electron_collision_freq with the same Coulomb logarithm;
    # NRL's 2.91e-6 n lnL T^-3/2 is the same formula rounded to 3 digits.
    from plasmapy.formulary.collisions import frequencies

    lnl = float(coulomb_logarithm(n_m3, t_ev))
    with warnings.catch_warnings():  # PlasmaPy warns that coulomb_log carries no unit
        warnings.simplefilter("ignore")
        ref = frequencies.fundamental_electron_collision_freq(
            t_ev * u.eV, n_m3 * u.m**-3, "Xe+", coulomb_log=lnl
        ).to_value(1 / u.s)
    assert electron_ion_collision_frequency(n_m3, t_ev) == pytest.approx(ref, rel=0.01)
    assert _kernels.nu_ei_nrl(n_m3, t_ev) == pytest.approx(
        float(electron_ion_collision_frequency(n_m3, t_ev)), rel=1e-12
    )


@pytest.mark.parametrize(("t_ev", "b_tesla"), [(2.0, 0.005), (20.0, 0.017), (60.0, 0.03)])
def test_bohm_diffusion_matches_plasmapy(t_ev, b_tesla):
    # PlasmaPy formulary.Bohm_diffusion: k T / (16 e B)
    ref = formulary.Bohm_diffusion(t_ev * u.eV, b_tesla * u.T).to_value(u.m**2 / u.s)
    assert bohm_diffusion(t_ev, b_tesla) == pytest.approx(ref, rel=1e-9)


def test_cross_field_mobility_closed_form_limits():
    # Goebel and Katz 2008, ch. 3: mu = (e / m nu) / (1 + Omega^2); limits B -> 0
    # (unmagnetised e / (m nu)) and Omega >> 1 (m nu / (e B^2)).
    nu = 1e7
    assert cross_field_mobility(nu, 0.0) == pytest.approx(constants.e / (constants.m_e * nu))
    b = 0.5
    assert cross_field_mobility(nu, b) == pytest.approx(
        constants.m_e * nu / (constants.e * b**2), rel=1e-6
    )


def test_kernel_constants_match_codata():
    # scipy.constants (CODATA 2018)
    assert constants.e == _kernels._E
    assert constants.m_e == pytest.approx(_kernels._ME, rel=1e-12)


@pytest.mark.parametrize(("name", "symbol"), [("xenon", "Xe"), ("krypton", "Kr")])
def test_propellant_data_matches_plasmapy(name, symbol):
    # PlasmaPy particles (standard atomic weight; NIST ASD ionization energy)
    prop = get_propellant(name)
    part = particles.Particle(symbol)
    assert prop.mass_kg == pytest.approx(part.mass.to_value(u.kg), rel=1e-4)
    assert prop.ionization_energy_eV == pytest.approx(
        part.ionization_energy.to_value(u.eV), rel=1e-4
    )


def test_energy_bound_reference_values():
    # REFERENCES: sqrt(2 e V / M) = 20,998 m/s for Xe at 300 V, 26,284 m/s for Kr at 300 V
    assert get_propellant("xenon").max_ion_velocity(300.0) == pytest.approx(20998, rel=2e-4)
    assert get_propellant("krypton").max_ion_velocity(300.0) == pytest.approx(26284, rel=2e-4)
    assert np.isfinite(get_propellant("xenon").max_ion_velocity(500.0))
