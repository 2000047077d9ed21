"""Bad configuration raises InputDataError naming the field; parse helpers."""

from __future__ import annotations

import numpy as np
import pytest

from profshape.exceptions import ConfigError, InputDataError
from profshape.operating_point import OperatingPoint
from profshape.profile import AnomalousProfile
from profshape.solver import (
    BellField,
    Device,
    SolverSettings,
    TabulatedField,
    demo_device,
    demo_operating_points,
    grid,
    solve,
)
from profshape.solver.config import (
    device_from_mapping,
    point_from_mapping,
    profile_from_mapping,
    settings_from_mapping,
)

FAST = SolverSettings(n_cells=40, window_s=3e-5, min_time_s=0.0, max_time_s=1e-4)


def _flat(level=0.01):
    return AnomalousProfile("bohm", lambda z: np.full_like(z, level))


def test_negative_flow_and_zero_voltage_name_the_field():
    with pytest.raises(InputDataError, match="anode_mass_flow_kg_s"):
        OperatingPoint("p", 300.0, -1e-6)
    with pytest.raises(InputDataError, match="discharge_voltage_V"):
        OperatingPoint("p", 0.0, 4e-6)


def test_unknown_propellant_names_the_field():
    with pytest.raises(InputDataError, match="propellant"):
        OperatingPoint("p", 300.0, 4e-6, "unobtainium")
    # known to the package but without rate data in the solver
    with pytest.raises(InputDataError, match="propellant"):
        solve(demo_device(), OperatingPoint("p", 300.0, 4e-6, "argon"), _flat(), FAST)


def test_tabulated_field_must_span_the_grid():
    base = demo_device()
    short = TabulatedField([0.0, 0.03], [0.01, 0.02])
    dev = Device(0.024, 0.032, 0.044, 0.06, short)
    with pytest.raises(InputDataError, match=r"magnetic_field\.z_m"):
        solve(dev, demo_operating_points()[0], _flat(), FAST)
    with pytest.raises(InputDataError, match="B_T"):
        TabulatedField([0.0, 0.03, 0.06], [0.01, 0.02])
    assert base.channel_area_m2 == pytest.approx(np.pi * (0.044**2 - 0.032**2))


def test_tabulated_field_equivalent_to_bell_field():
    dev = demo_device()
    z = np.linspace(0.0, dev.domain_length_m, 400)
    tab = Device(0.024, 0.032, 0.044, 0.06, TabulatedField(z, dev.magnetic_field(z)))
    a = solve(dev, demo_operating_points()[0], _flat(), FAST)
    b = solve(tab, demo_operating_points()[0], _flat(), FAST)
    assert a.cells["magnetic_field_T"].to_numpy() == pytest.approx(
        b.cells["magnetic_field_T"].to_numpy(), rel=1e-3
    )


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"inner_radius_m": 0.05}, "outer_radius_m"),
        ({"channel_length_m": -0.01}, "channel_length_m"),
        ({"domain_length_m": 0.5}, "domain_length_m"),
        ({"anode_temperature_K": float("nan")}, "anode_temperature_K"),
        ({"cathode_electron_temperature_eV": 0.0}, "cathode_electron_temperature_eV"),
    ],
)
def test_device_validation_names_the_field(kwargs, field):
    base = dict(
        channel_length_m=0.024, inner_radius_m=0.032, outer_radius_m=0.044,
        domain_length_m=0.06, magnetic_field=demo_device().magnetic_field,
    )
    with pytest.raises(InputDataError, match=field):
        Device(**{**base, **kwargs})


def test_bell_field_validation():
    with pytest.raises(InputDataError, match="peak_T"):
        BellField(-0.01, 0.024, 0.01, 0.01)
    with pytest.raises(InputDataError, match="width_downstream_m"):
        BellField(0.02, 0.024, 0.01, 0.0)
    b = BellField(0.02, 0.024, 0.01, 0.014)
    assert b(np.array([0.024]))[0] == pytest.approx(0.02)
    assert b(np.array([0.024 + 0.014]))[0] == pytest.approx(0.02 / np.e)


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [({"n_cells": 5}, "n_cells"), ({"cfl": 2.0}, "cfl"), ({"n_cells": 10.5}, "n_cells"),
     ({"max_time_s": 1e-5}, "max_time_s"), ({"tolerance": float("inf")}, "tolerance")],
)
def test_settings_validation_names_the_field(kwargs, field):
    with pytest.raises(InputDataError, match=field):
        SolverSettings(**kwargs)


def test_solve_rejects_wrong_types():
    with pytest.raises(InputDataError, match="profile"):
        solve(demo_device(), demo_operating_points()[0], lambda z: z, FAST)
    with pytest.raises(InputDataError, match="device"):
        solve("device", demo_operating_points()[0], _flat(), FAST)


def test_bad_profile_values_give_failed_status_not_exception():
    point = demo_operating_points()[0]
    bad = AnomalousProfile("bohm", lambda z: np.where(z > 0.03, np.nan, 0.01))
    r = solve(demo_device(), point, bad, FAST)
    assert r.status == "failed" and "non-finite" in r.reason
    raising = AnomalousProfile("bohm", lambda z: 1 / 0)
    r = solve(demo_device(), point, raising, FAST)
    assert r.status == "failed" and "ZeroDivisionError" in r.reason


def test_mapping_helpers_round_trip_and_name_unknown_keys():
    dev = demo_device()
    assert device_from_mapping(dev.to_dict()) == dev
    with pytest.raises(ConfigError, match="chanel_length_m"):
        device_from_mapping({"chanel_length_m": 0.02})
    with pytest.raises(ConfigError, match="peak_T"):
        device_from_mapping({"magnetic_field": {"peak_z_m": 0.02}})
    with pytest.raises(ConfigError, match=r"magnetic_field\.B_T"):
        device_from_mapping({"magnetic_field": {"z_m": [0, 0.06], "B_T": ["a", 1]}})
    with pytest.raises(ConfigError, match="channel_length_m"):
        device_from_mapping({"channel_length_m": "long"})
    tab = device_from_mapping({"magnetic_field": {"z_m": [0.0, 0.06], "B_T": [0.01, 0.02]}})
    assert isinstance(tab.magnetic_field, TabulatedField)
    s = settings_from_mapping({"n_cells": 120, "cfl": 0.5})
    assert s.n_cells == 120 and s.cfl == 0.5
    with pytest.raises(ConfigError, match="n_cels"):
        settings_from_mapping({"n_cels": 100})
    with pytest.raises(ConfigError, match="n_cells"):
        settings_from_mapping({"n_cells": 3})
    assert settings_from_mapping(SolverSettings().to_dict()) == SolverSettings()
    p = point_from_mapping({"discharge_voltage_V": 250})
    assert p.discharge_voltage_V == 250.0
    with pytest.raises(ConfigError, match="anode_mass_flow_kg_s"):
        point_from_mapping({"anode_mass_flow_kg_s": -1e-6})
    with pytest.raises(ConfigError, match="voltage"):
        point_from_mapping({"voltage": 300})


def test_profile_from_mapping():
    dev = demo_device()
    coeffs = {"log10_inner_level": -2.5, "log10_outer_level": -1.0,
              "transition_z_m": 0.024, "transition_width_m": 0.002}
    prof = profile_from_mapping({"family": "smooth_step", "coefficients": coeffs}, dev)
    z = grid(dev)
    vals = prof(z)
    assert vals[0] == pytest.approx(10**-2.5, rel=1e-3)
    assert vals[-1] == pytest.approx(0.1, rel=1e-3)
    with pytest.raises(ConfigError, match="log10_outer_level"):
        profile_from_mapping({"family": "smooth_step",
                              "coefficients": {"log10_inner_level": -2.5}}, dev)
    with pytest.raises(ConfigError, match="bogus"):
        profile_from_mapping({"family": "smooth_step",
                              "coefficients": {**coeffs, "bogus": 1.0}}, dev)
    with pytest.raises(ConfigError):
        profile_from_mapping({"family": "no_such_family", "coefficients": {}}, dev)
