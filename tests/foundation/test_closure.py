"""Coefficients that depend on the operating condition (profshape.closure)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from profshape import OperatingPoint
from profshape.closure import ConditionClosure, ConditionFeature
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.exceptions import InputDataError
from profshape.forward import ForwardModel, Prediction
from profshape.problem import CalibrationProblem
from profshape.shapes import SmoothStep

ZG = np.linspace(0.0, 0.0625, 60)
VOLTS = (200.0, 300.0, 400.0)


class _Cumulative(ForwardModel):
    name = "cumulative-test"

    def run(self, profile, point):
        c = profile(ZG)
        return Prediction("ok", ZG, 2e4 * np.cumsum(c) / np.sum(c), {"discharge_current": 4 + c.mean()})

    def grid(self, point):
        return ZG


def _dataset(volts=VOLTS):
    z = np.array([0.01, 0.02, 0.03, 0.04])
    return DataSet([OperatingPointData(OperatingPoint(f"{v:g}V", v, 5e-6),
                                       IonVelocityProfile(z, [2e3, 6e3, 1.2e4, 1.6e4], [300.0] * 4))
                    for v in volts])


def _problem(closure=None, **kw):
    return CalibrationProblem(SmoothStep(), _dataset(), _Cumulative(), closure=closure, **kw)


VOLTAGE = ConditionFeature("discharge_voltage_V")


def test_feature_checks():
    with pytest.raises(InputDataError, match="'colour' is not a numeric operating-point field"):
        ConditionFeature("colour")
    with pytest.raises(InputDataError, match="transform must be 'identity' or 'log10'; got 'ln'"):
        ConditionFeature("discharge_voltage_V", transform="ln")
    with pytest.raises(InputDataError, match="floor applies to a log10 feature"):
        ConditionFeature("discharge_voltage_V", floor=1.0)
    f = ConditionFeature("anode_mass_flow_kg_s", "log10")
    assert f.name == "log10_anode_mass_flow_kg_s"
    assert f.value(OperatingPoint("p", 300.0, 5e-6)) == pytest.approx(math.log10(5e-6), rel=1e-15)


def test_slope_parameters_and_bounds():
    prob = _problem(ConditionClosure((VOLTAGE,), coefficients=("transition_z_m", "log10_outer_level"),
                                     slope_bounds={"log10_outer_level": (-0.3, 0.3)}))
    names = prob.names
    assert names[:4] == SmoothStep().names
    assert names[4:] == ("transition_z_m__per__discharge_voltage_V",
                         "log10_outer_level__per__discharge_voltage_V")
    b = prob.bounds
    width = SmoothStep().bounds[2, 1] - SmoothStep().bounds[2, 0]
    np.testing.assert_allclose(b[4], [-width / 2, width / 2])
    np.testing.assert_allclose(b[5], [-0.3, 0.3])


def test_affine_law_by_hand():
    # c_j(point) = a_j + b_j (V - 300) / 200 over the calibration voltages 200-400 V.
    prob = _problem(ConditionClosure((VOLTAGE,), coefficients=("transition_z_m",)))
    a = np.array([-3.0, -1.0, 0.025, 0.003])
    slope = 0.004
    c = np.concatenate([a, [slope]])
    fam = SmoothStep()
    z = np.linspace(0.0, 0.06, 41)
    for v in VOLTS:
        expected = a.copy()
        expected[2] += slope * (v - 300.0) / 200.0
        np.testing.assert_allclose(prob.profile_for(c, f"{v:g}V")(z), fam.profile(expected)(z), rtol=1e-13)
    # Off the data: the same law, and flagged as an extrapolation beyond 400 V.
    far = OperatingPoint("far", 500.0, 5e-6)
    expected = a.copy()
    expected[2] += slope * 1.0
    np.testing.assert_allclose(prob.profile_at(c, far)(z), fam.profile(expected)(z), rtol=1e-13)
    assert "discharge_voltage_V = 500 outside calibrated [200, 400]" in prob.closure.extrapolation_reason(far)
    assert prob.closure.extrapolation_reason(OperatingPoint("in", 250.0, 5e-6)) == ""


def test_zero_slopes_reduce_to_one_profile():
    plain = _problem()
    prob = _problem(ConditionClosure((VOLTAGE,)))
    a = np.array([-3.0, -1.0, 0.025, 0.003])
    c = np.concatenate([a, np.zeros(prob.dim - 4)])
    for lab in plain.dataset.labels:
        assert prob.evaluate(c).misfit.chi2 == pytest.approx(plain.evaluate(a).misfit.chi2, rel=1e-12)
        np.testing.assert_array_equal(prob.profile_for(c, lab)(ZG), plain.profile_for(a, lab)(ZG))


def test_out_of_bounds_coefficient_is_held_and_noted():
    prob = _problem(ConditionClosure((VOLTAGE,), coefficients=("transition_z_m",)))
    upper = SmoothStep().bounds[2, 1]
    c = np.array([-3.0, -1.0, upper - 0.001, 0.003, 0.0125])
    prof = prob.profile_for(c, "400V")
    assert prof.coefficients["transition_z_m"] == pytest.approx(upper)
    assert prof.coefficients["clipped__transition_z_m"] == 1.0
    assert "clipped__transition_z_m" not in prob.profile_for(c, "300V").coefficients


def test_constant_feature_refused():
    with pytest.raises(InputDataError, match=r"'magnetic_field_scale' is constant \(1\) across the calibration points"):
        _problem(ConditionClosure((ConditionFeature("magnetic_field_scale"),)))


def test_bad_closure_settings_refused():
    with pytest.raises(InputDataError, match=r"coefficient\(s\) \['centre'\] are not in family"):
        _problem(ConditionClosure((VOLTAGE,), coefficients=("centre",)))
    with pytest.raises(InputDataError, match="slope_bounds names \\['nonsense'\\]"):
        _problem(ConditionClosure((VOLTAGE,), slope_bounds={"nonsense": (-1, 1)}))
    with pytest.raises(InputDataError, match="features must be distinct"):
        ConditionClosure((VOLTAGE, ConditionFeature("discharge_voltage_V")))
    with pytest.raises(InputDataError, match="needs at least two operating points"):
        CalibrationProblem(SmoothStep(), _dataset((300.0,)), _Cumulative(), closure=ConditionClosure((VOLTAGE,)))


def test_log_feature_with_floor_flags_space():
    flow = ConditionFeature("anode_mass_flow_kg_s", "log10", floor=1e-7)
    ds = DataSet([OperatingPointData(OperatingPoint(f"m{i}", 300.0, m),
                                     IonVelocityProfile([0.01, 0.02], [3e3, 9e3], [300.0] * 2))
                  for i, m in enumerate((3e-6, 6e-6))])
    prob = CalibrationProblem(SmoothStep(), ds, _Cumulative(), closure=ConditionClosure((flow,)))
    low = OperatingPoint("low", 300.0, 5e-8)
    assert "below the feature floor" in prob.closure.extrapolation_reason(low)
    # The floor is used as the value: normalised feature (log10(1e-7) - mid) / span.
    mid = 0.5 * (math.log10(3e-6) + math.log10(6e-6))
    span = math.log10(6e-6) - math.log10(3e-6)
    assert prob.closure.normalised(low)[0] == pytest.approx((-7 - mid) / span, rel=1e-12)


def test_closure_with_free_scales():
    prob = _problem(ConditionClosure((VOLTAGE,), coefficients=("transition_z_m",)), free_scale_per_point=True)
    assert prob.names[-3:] == ("log10_scale__200V", "log10_scale__300V", "log10_scale__400V")
    c = np.array([-3.0, -1.0, 0.025, 0.003, 0.0, 0.1, 0.2, 0.3])
    base = _problem(ConditionClosure((VOLTAGE,), coefficients=("transition_z_m",)))
    np.testing.assert_allclose(prob.profile_for(c, "400V")(ZG), 10 ** 0.3 * base.profile_for(c[:5], "400V")(ZG),
                               rtol=1e-13)
    # Off the data: the mean log10 scale.
    off = OperatingPoint("off", 300.0, 5e-6)
    np.testing.assert_allclose(prob.profile_at(c, off)(ZG), 10 ** 0.2 * base.profile_for(c[:5], "300V")(ZG),
                               rtol=1e-13)
