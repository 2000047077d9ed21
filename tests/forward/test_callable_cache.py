"""CallableModel result forms and the on-disk result cache."""

from __future__ import annotations

import numpy as np
import pytest

from profshape import OperatingPoint
from profshape.forward.base import Prediction
from profshape.forward.cache import CachedModel
from profshape.forward.callable import CallableModel
from profshape.profile import AnomalousProfile

POINT = OperatingPoint("300V", 300.0, 4.5e-6)
Z = np.linspace(0, 0.05, 6)


def _const(z):
    return 0.01 + 0 * z


PROFILE = AnomalousProfile("bohm", _const, {"level": 0.01}, "const")
CALLS = []


def counted(profile, point):
    CALLS.append(1)
    return {"z_m": Z, "ion_velocity_m_s": 1e3 + Z * 1e5, "scalars": {"discharge_current": 4.0}}


@pytest.mark.parametrize(
    ("result", "status", "reason"),
    [
        ((Z, Z * 1e5), "ok", ""),
        ({"z_m": Z, "ion_velocity_m_s": Z * 1e5, "scalars": {"thrust": 0.05}}, "ok", ""),
        (Prediction("ok", Z, Z * 1e5), "ok", ""),
        ({"status": "not_converged", "reason": "slow"}, "not_converged", "slow"),
        ({"z_m": Z, "ion_velocity_m_s": Z * np.nan}, "failed", "non-finite"),
        ({"velocity": Z}, "failed", "unknown keys"),
        ("nonsense", "failed", "returned str"),
    ],
)
def test_callable_result_forms(result, status, reason):
    p = CallableModel(lambda prof, pt: result)(PROFILE, POINT)
    assert p.status == status and reason in p.reason


def test_exception_becomes_failed_prediction():
    def boom(profile, point):
        raise ZeroDivisionError("mesh collapsed")

    p = CallableModel(boom)(PROFILE, POINT)
    assert p.status == "failed" and "ZeroDivisionError: mesh collapsed" in p.reason


def test_cache_hits_across_instances_and_version_misses(tmp_path):
    CALLS.clear()
    m = CachedModel(CallableModel(counted, version="1"), tmp_path)
    a = m(PROFILE, POINT)
    b = m(PROFILE, POINT)
    assert len(CALLS) == 1 and (m.hits, m.misses) == (1, 1)
    np.testing.assert_array_equal(a.ion_velocity_m_s, b.ion_velocity_m_s)
    assert b.scalars == {"discharge_current": 4.0}
    # a fresh instance on the same folder (a resumed run) hits too
    CachedModel(CallableModel(counted, version="1"), tmp_path)(PROFILE, POINT)
    assert len(CALLS) == 1
    # other coefficients, operating point or model version: recomputed
    other = AnomalousProfile("bohm", _const, {"level": 0.02}, "const")
    m(other, POINT)
    m(PROFILE, OperatingPoint("250V", 250.0, 4.5e-6))
    CachedModel(CallableModel(counted, version="2"), tmp_path)(PROFILE, POINT)
    assert len(CALLS) == 4


def _value_at_30mm(profile, point):
    """A model whose scalar output is the profile at z = 0.03 m."""
    z = np.linspace(0.0, 0.06, 7)
    return {"z_m": z, "ion_velocity_m_s": 1e4 + z, "scalars": {"level": float(profile(np.array([0.03]))[0])}}


def test_cache_key_holds_the_family_definition(tmp_path):
    """Issue 12, bug 1: two log_spline(5) families with other domain lengths, same coefficients.

    Their profiles differ at z = 0.03 m, so a shared cache folder must not return one's
    result for the other. Reference values: PCHIP through the nodes (scipy's
    PchipInterpolator as the reference implementation), in log10.
    """
    from scipy.interpolate import PchipInterpolator

    from profshape.shapes import get_family

    levels = np.array([-2.0, -2.0, -2.4, -1.0, -1.0])
    results = {}
    for domain in (0.06, 0.10):
        family = get_family("log_spline", n_nodes=5, domain_length_m=domain)
        model = CachedModel(CallableModel(_value_at_30mm, name="probe", version="1"), tmp_path)
        pred = model(family.profile(levels), POINT)
        expected = 10 ** PchipInterpolator(np.linspace(0.0, domain, 5), levels)(0.03)
        assert pred.scalars["level"] == pytest.approx(expected, rel=1e-9)
        results[domain] = pred.scalars["level"]
        assert model.misses == 1  # the second family is not answered from the first's entry
    assert results[0.06] != pytest.approx(results[0.10], rel=1e-3)
