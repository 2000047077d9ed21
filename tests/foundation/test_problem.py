"""The calibration problem: search space, per-point scales, trial outcomes."""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

from profshape import OperatingPoint
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.exceptions import InputDataError
from profshape.forward import ForwardModel, Prediction
from profshape.problem import CalibrationProblem
from profshape.shapes import SmoothStep

ZG = np.linspace(0.0, 0.0625, 60)


class _Linear(ForwardModel):
    """Velocity proportional to the cumulative profile: cheap and deterministic."""

    name = "linear-test"

    def run(self, profile, point):
        c = profile(ZG)
        if np.max(c) > 0.5:
            raise RuntimeError("diverged")
        return Prediction("ok", ZG, 2e4 * np.cumsum(c) / np.sum(c), {"discharge_current": 4 + c.mean()})

    def grid(self, point):
        return ZG


def _problem(**kw):
    z = np.array([0.01, 0.02, 0.03, 0.04])
    pts = [OperatingPointData(OperatingPoint(lab, v, 5e-6), IonVelocityProfile(z, [2e3, 6e3, 1.2e4, 1.6e4], [300.0] * 4))
           for lab, v in (("a", 300.0), ("b", 250.0))]
    return CalibrationProblem(SmoothStep(), DataSet(pts), _Linear(), **kw)


def test_space_with_scales_and_discrepancy():
    pr = _problem(free_scale_per_point=True, discrepancy_bounds_m_s=(10.0, 1000.0))
    assert pr.names[-3:] == ("log10_scale__a", "log10_scale__b", "log10_discrepancy_sigma_m_s")
    assert pr.dim == 7
    u = np.linspace(0.1, 0.9, pr.dim)
    np.testing.assert_allclose(pr.to_unit(pr.from_unit(u)), u)
    c = pr.from_unit(u)
    scale_a = 10 ** c[4]
    np.testing.assert_allclose(pr.profile_for(c, "a")(ZG), scale_a * pr.family.evaluate(c[:4], ZG))
    assert pr.discrepancy_sigma_m_s(c) == pytest.approx(10 ** c[6])


def test_evaluate_serial_equals_parallel():
    pr = _problem()
    c = pr.from_unit(np.full(4, 0.4))
    a = pr.evaluate(c)
    with ThreadPoolExecutor(2) as ex:
        b = pr.evaluate(c, ex)
    assert a.ok and b.ok
    assert a.misfit.chi2 == pytest.approx(b.misfit.chi2)
    assert set(a.misfit.per_point) == {"a", "b"}


def test_failed_forward_run_is_an_outcome():
    pr = _problem()
    c = pr.family.coefficients_from_dict({"log10_inner_level": -2.0, "log10_outer_level": 0.0,
                                          "transition_z_m": 0.02, "transition_width_m": 0.002})
    out = pr.evaluate(c)
    assert out.status == "failed" and not out.ok
    assert "RuntimeError: diverged" in out.reason
    assert not out.misfit.ok


def test_bad_coefficients_and_domain():
    pr = _problem()
    with pytest.raises(InputDataError, match=r"shape \(4,\)"):
        pr.evaluate([0.1, 0.2])
    z = np.array([0.01, 0.09])
    pts = [OperatingPointData(OperatingPoint("a", 300.0, 5e-6), IonVelocityProfile(z, [2e3, 1.6e4], [300.0] * 2))]
    with pytest.raises(InputDataError, match="outside the model domain"):
        CalibrationProblem(SmoothStep(), DataSet(pts), _Linear())
    with pytest.raises(InputDataError, match="CallableModel"):
        CalibrationProblem(SmoothStep(), DataSet(pts), lambda p, q: None)


def test_extra_parameters_checked_like_family_ones():
    pr = _problem(free_scale_per_point=True)
    c = pr.from_unit(np.full(pr.dim, 0.5))
    c[4] = 3.0  # log10_scale__a bounds are [-1, 1]
    with pytest.raises(InputDataError, match=r"'log10_scale__a' = 3.0 is outside its bounds \[-1.0, 1.0\]"):
        pr.validate(c)
    c[4] = np.nan
    with pytest.raises(InputDataError, match="'log10_scale__a' is nan"):
        pr.validate(c)
