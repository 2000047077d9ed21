"""Measurement data: construction, files, and every bad-input message."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from profshape import OperatingPoint
from profshape.data import (
    DataSet,
    IonVelocityProfile,
    OperatingPointData,
    ScalarObservable,
    load_dataset,
    read_ion_velocity_table,
)
from profshape.exceptions import InputDataError, ProfshapeWarning

Z = np.array([0.005, 0.015, 0.025, 0.035])
V = np.array([1500.0, 4000.0, 12000.0, 17000.0])
S = np.array([250.0, 250.0, 400.0, 400.0])


def _dataset():
    p1 = OperatingPointData(
        OperatingPoint("300V", 300.0, 4.5e-6, "xenon"),
        IonVelocityProfile(Z, V, S, sigma_z_m=np.full(4, 3e-4)),
        {"discharge_current": ScalarObservable("discharge_current", 4.2, 0.1)},
    )
    p2 = OperatingPointData(
        OperatingPoint("250V", 250.0, 4.5e-6, "Xe", magnetic_field_scale=0.9),
        IonVelocityProfile(Z, 0.9 * V, S),
    )
    return DataSet([p1, p2])


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_round_trip(tmp_path, fmt):
    ds = _dataset()
    ds.save(tmp_path, format=fmt)
    back = load_dataset(tmp_path)
    assert back.labels == ds.labels
    for a, b in zip(ds, back, strict=True):
        assert a.point == b.point
        np.testing.assert_array_equal(a.ion_velocity.z_m, b.ion_velocity.z_m)
        np.testing.assert_array_equal(a.ion_velocity.sigma_m_s, b.ion_velocity.sigma_m_s)
        assert a.scalars == b.scalars
    assert back["250V"].ion_velocity.sigma_z_m is None
    np.testing.assert_array_equal(back["300V"].ion_velocity.sigma_z_m, 3e-4)


def test_unsorted_positions_are_sorted_with_warning():
    with pytest.warns(ProfshapeWarning, match="sorted"):
        p = IonVelocityProfile(Z[::-1], V[::-1], S[::-1])
    np.testing.assert_array_equal(p.z_m, Z)
    np.testing.assert_array_equal(p.velocity_m_s, V)
    assert p.rows == (4, 3, 2, 1)


def _write_velocity(tmp_path, df, name="v.csv"):
    path = tmp_path / name
    df.to_csv(path, index=False)
    return path


def _frame(**changes):
    df = pd.DataFrame({"z_m": Z, "ion_velocity_m_s": V, "sigma_ion_velocity_m_s": S})
    for key, value in changes.items():
        df[key] = value
    return df


@pytest.mark.parametrize(
    ("changes", "match"),
    [
        ({"ion_velocity_m_s": [1500.0, np.nan, 1.2e4, 1.7e4]}, r"row 2, column 'ion_velocity_m_s'.*not finite"),
        ({"ion_velocity_m_s": [1500.0, np.inf, 1.2e4, 1.7e4]}, r"row 2, column 'ion_velocity_m_s'.*not finite"),
        ({"sigma_ion_velocity_m_s": [250.0, 0.0, 400.0, 400.0]}, r"row 2, column 'sigma_ion_velocity_m_s'.*> 0"),
        ({"sigma_ion_velocity_m_s": [250.0, 250.0, -4.0, 400.0]}, r"row 3.*> 0"),
        ({"z_m": [0.005, 0.015, 0.015, 0.035]}, r"row 3, column 'z_m'.*repeats row 2"),
        ({"z_m": Z * 1000}, r"looks like millimetres.*metres"),
        ({"ion_velocity_m_s": V / 1000}, r"looks like km/s"),
        ({"z_m": ["0.005", "abc", "0.025", "0.035"]}, r"row 2, column 'z_m'.*not a number"),
        ({"sigma_z_m": [3e-4, -1e-4, 3e-4, 3e-4]}, r"row 2, column 'sigma_z_m'.*>= 0"),
        ({"sigma_z_m": [0.3, 0.3, 0.3, 0.3]}, r"sigma_z_m.*millimetres"),
    ],
)
def test_bad_velocity_file(tmp_path, changes, match):
    path = _write_velocity(tmp_path, _frame(**changes))
    with pytest.raises(InputDataError, match=match) as info:
        read_ion_velocity_table(path)
    assert str(path) in str(info.value)


def test_missing_and_unknown_columns(tmp_path):
    path = _write_velocity(tmp_path, _frame().drop(columns=["sigma_ion_velocity_m_s"]))
    with pytest.raises(InputDataError, match=r"missing column\(s\) \['sigma_ion_velocity_m_s'\]"):
        read_ion_velocity_table(path)
    path = _write_velocity(tmp_path, _frame().rename(columns={"z_m": "z_mm"}), "mm.csv")
    with pytest.raises(InputDataError, match="millimetres"):
        read_ion_velocity_table(path)
    path = _write_velocity(tmp_path, _frame(comment="x"), "extra.csv")
    with pytest.raises(InputDataError, match=r"unknown column\(s\) \['comment'\]"):
        read_ion_velocity_table(path)


def test_empty_files(tmp_path):
    empty = tmp_path / "empty.csv"
    empty.write_text("")
    with pytest.raises(InputDataError, match="empty"):
        read_ion_velocity_table(empty)
    header = tmp_path / "header.csv"
    header.write_text("z_m,ion_velocity_m_s,sigma_ion_velocity_m_s\n")
    with pytest.raises(InputDataError, match="no data rows"):
        read_ion_velocity_table(header)
    with pytest.raises(InputDataError, match="file not found"):
        read_ion_velocity_table(tmp_path / "nope.csv")
    with pytest.raises(InputDataError, match="empty set"):
        IonVelocityProfile([], [], [])
    with pytest.raises(InputDataError, match="data set is empty"):
        DataSet([])


def test_corrupt_parquet(tmp_path):
    bad = tmp_path / "v.parquet"
    bad.write_bytes(b"PAR1 not really")
    with pytest.raises(InputDataError, match="cannot be read"):
        read_ion_velocity_table(bad)


def test_dataset_folder_errors(tmp_path):
    ds = _dataset()
    ds.save(tmp_path)
    ops = pd.read_csv(tmp_path / "operating_points.csv")
    ops.loc[1, "propellant"] = "unobtainium"
    ops.to_csv(tmp_path / "operating_points.csv", index=False)
    with pytest.raises(InputDataError, match=r"operating_points.csv, row 2.*unknown propellant 'unobtainium'"):
        load_dataset(tmp_path)
    ops.loc[1, "propellant"] = "krypton"
    ops.loc[1, "discharge_voltage_V"] = 0.0
    ops.to_csv(tmp_path / "operating_points.csv", index=False)
    with pytest.raises(InputDataError, match=r"row 2.*discharge_voltage_V.*> 0"):
        load_dataset(tmp_path)
    ops.loc[1, "discharge_voltage_V"] = 250.0
    ops.to_csv(tmp_path / "operating_points.csv", index=False)
    vel = pd.read_csv(tmp_path / "ion_velocity.csv")
    vel.loc[6, "label"] = "999V"
    vel.to_csv(tmp_path / "ion_velocity.csv", index=False)
    with pytest.raises(InputDataError, match=r"ion_velocity.csv, row 7, column 'label'.*'999V'"):
        load_dataset(tmp_path)
    vel.loc[6, "label"] = "250V"
    vel.loc[5, "sigma_ion_velocity_m_s"] = -1
    vel.to_csv(tmp_path / "ion_velocity.csv", index=False)
    with pytest.raises(InputDataError, match=r"ion_velocity.csv, row 6, column 'sigma_ion_velocity_m_s'"):
        load_dataset(tmp_path)
    with pytest.raises(InputDataError, match="data set folder not found"):
        load_dataset(tmp_path / "missing")


def test_scalar_checks():
    with pytest.raises(InputDataError, match="unit must be 'N'"):
        ScalarObservable("thrust", 80.0, 2.0, "mN")
    with pytest.raises(InputDataError, match="sigma must be > 0"):
        ScalarObservable("discharge_current", 4.0, 0.0)
    with pytest.raises(InputDataError, match="finite"):
        ScalarObservable("discharge_current", np.nan, 0.1)
    assert ScalarObservable("plume_angle", 0.5, 0.05, "rad").unit == "rad"


def test_operating_point_checks():
    with pytest.raises(InputDataError, match=r"anode_mass_flow_kg_s.*> 0"):
        OperatingPoint("a", 300.0, -1e-6)
    with pytest.raises(InputDataError, match=r"implausibly large.*kg/s"):
        OperatingPoint("a", 300.0, 5.0)
    with pytest.raises(InputDataError, match="unknown propellant"):
        OperatingPoint("a", 300.0, 5e-6, "neon-ish")
    assert OperatingPoint("a", 300, 5e-6, "Kr").propellant == "krypton"


def test_domain_and_no_measurements():
    p = IonVelocityProfile(Z, V, S, source="lif.csv")
    with pytest.raises(InputDataError, match=r"lif.csv, row 4, column 'z_m'.*outside the model domain"):
        p.check_domain(0.0, 0.03)
    with pytest.raises(InputDataError, match="no measurements"):
        OperatingPointData(OperatingPoint("a", 300.0, 5e-6))
    pt = OperatingPointData(OperatingPoint("a", 300.0, 5e-6), p)
    with pytest.raises(InputDataError, match="unique"):
        DataSet([pt, pt])


@settings(max_examples=50, deadline=None)
@given(st.lists(st.floats(0.0, 0.08), min_size=1, max_size=30, unique=True),
       st.floats(200.0, 3e4), st.floats(1.0, 1e3))
def test_profile_property(zs, v0, sigma):
    z = np.array(zs)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ProfshapeWarning)
        p = IonVelocityProfile(z, np.full(z.size, v0), np.full(z.size, sigma))
    assert np.all(np.diff(p.z_m) > 0)
    assert sorted(p.rows) == list(range(1, z.size + 1))
    np.testing.assert_array_equal(np.sort(z), p.z_m)


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_background_pressure_round_trip_and_default(tmp_path, fmt):
    ds = DataSet([OperatingPointData(
        OperatingPoint("p1", 300.0, 4.5e-6, background_pressure_Pa=2.5e-3, background_temperature_K=290.0),
        IonVelocityProfile(Z, V, S))])
    ds.save(tmp_path, format=fmt)
    back = load_dataset(tmp_path)
    assert back["p1"].point.background_pressure_Pa == 2.5e-3
    assert back["p1"].point.background_temperature_K == 290.0
    # A table without the optional columns means space (0 Pa) at 300 K.
    ops = tmp_path / f"operating_points.{fmt}"
    frame = pd.read_csv(ops) if fmt == "csv" else pd.read_parquet(ops)
    frame = frame.drop(columns=["background_pressure_Pa", "background_temperature_K"])
    frame.to_csv(ops, index=False) if fmt == "csv" else frame.to_parquet(ops, index=False)
    assert load_dataset(tmp_path)["p1"].point.background_pressure_Pa == 0.0


def test_negative_background_pressure_names_the_row(tmp_path):
    _dataset().save(tmp_path)
    ops = pd.read_csv(tmp_path / "operating_points.csv")
    ops["background_pressure_Pa"] = [1e-3, -1e-3]
    ops.to_csv(tmp_path / "operating_points.csv", index=False)
    with pytest.raises(InputDataError, match=r"operating_points.csv, row 2: .*background_pressure_Pa"):
        load_dataset(tmp_path)
