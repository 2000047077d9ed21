"""Rate coefficients: Maxwellian averaging and published xenon values."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants

from profshape.exceptions import InputDataError
from profshape.solver.rates import (
    excitation_rate,
    ionization_rate,
    lotz_cross_section,
    maxwellian_rate,
    mean_electron_speed,
    momentum_transfer_rate,
    rate_set,
)


@pytest.mark.parametrize("t_ev", [0.5, 3.0, 17.0, 90.0])
def test_maxwellian_average_of_constant_cross_section_is_sigma_times_mean_speed(t_ev):
    # exact: <sigma v> = sigma sqrt(8 e T / (pi m_e)) for constant sigma (REFERENCES)
    sigma = 3e-20
    ref = sigma * np.sqrt(8 * constants.e * t_ev / (np.pi * constants.m_e))
    got = maxwellian_rate(lambda e: np.full_like(e, sigma), t_ev)
    assert got == pytest.approx(ref, rel=1e-10)
    assert mean_electron_speed(t_ev) == pytest.approx(ref / sigma, rel=1e-12)


def test_maxwellian_average_of_step_cross_section_closed_form():
    # sigma = s0 for E > E0: <sigma v> = s0 vbar (1 + E0/T) exp(-E0/T) (closed form)
    s0, e0, t = 2e-20, 12.0, 4.0
    got = maxwellian_rate(lambda e: np.where(e > e0, s0, 0.0), t, threshold_eV=e0)
    ref = s0 * mean_electron_speed(t) * (1 + e0 / t) * np.exp(-e0 / t)
    assert got == pytest.approx(ref, rel=1e-8)


@pytest.mark.parametrize(
    ("t_ev", "ref"),
    # From memory (REFERENCES.md): Goebel and Katz 2008 appendix fits, checked to 30 %.
    [(2.0, 1.1e-16), (5.0, 8e-15), (10.0, 4.0e-14), (20.0, 1.0e-13), (40.0, 1.9e-13)],
)
def test_xenon_ionization_rate_near_published_values(t_ev, ref):
    assert ionization_rate("xenon", t_ev) == pytest.approx(ref, rel=0.30)


def test_xenon_momentum_transfer_rate_matches_a_cross_section_times_mean_speed():
    # Independent of the constant: the electron-xenon momentum-transfer cross-section near
    # 10 eV is about 1.2e-19 m^2 (from memory; swarm-derived compilations such as Hayashi
    # 1983), so sigma * vbar(T_e = 10 eV) with vbar = sqrt(8 e T / (pi m_e)) from
    # scipy.constants must agree with the rate within 50 %.
    vbar = np.sqrt(8 * constants.e * 10.0 / (np.pi * constants.m_e))
    assert momentum_transfer_rate("xenon", 10.0) == pytest.approx(1.2e-19 * vbar, rel=0.5)


def test_krypton_ionization_is_lotz_average_and_sane():
    t = np.array([2.0, 5.0, 10.0, 20.0, 40.0])
    k = ionization_rate("krypton", t)
    assert np.all(np.diff(k) > 0) and np.all(np.isfinite(k))
    # Lotz cross-section peaks at E = e P for one shell: a q / (e P^2) (closed form)
    e = np.array([np.e * 14.0])
    assert lotz_cross_section(e, ((6.0, 14.0),))[0] == pytest.approx(
        4.5e-14 * 6 / (np.e * 14.0**2) * 1e-4, rel=1e-12
    )
    # krypton ionizes less readily than xenon at low temperature (higher threshold)
    assert ionization_rate("krypton", 2.0) < 2 * ionization_rate("xenon", 2.0)


def test_rate_table_interpolates_the_functions():
    rs = rate_set("xenon")
    t = np.array([1.0, 7.3, 33.3, 95.0])
    k_tab = np.interp(t, rs.t0_eV + rs.dt_eV * np.arange(rs.ionization_m3_s.size),
                      rs.ionization_m3_s)
    assert k_tab == pytest.approx(ionization_rate("xenon", t), rel=5e-3)
    loss = ionization_rate("xenon", t) * 12.1298 + excitation_rate("xenon", t) * 11.6
    loss_tab = np.interp(t, rs.t0_eV + rs.dt_eV * np.arange(rs.ionization_m3_s.size),
                         rs.energy_loss_eV_m3_s)
    assert loss_tab == pytest.approx(loss, rel=5e-3)


def test_unsupported_propellant_names_the_field():
    with pytest.raises(InputDataError, match="propellant"):
        ionization_rate("argon", 10.0)
    with pytest.raises(InputDataError, match="propellant"):
        ionization_rate("neon", 10.0)
