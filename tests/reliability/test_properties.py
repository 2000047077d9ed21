"""Property tests (hypothesis): any data or coefficients give a valid object or a clear error.

Whatever numbers arrive, the library either accepts them (and then what it holds is
finite and consistent) or raises InputDataError; never another exception, never a
silent NaN.
"""

from __future__ import annotations

import io
import math
import warnings

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from profshape.data import IonVelocityProfile, read_ion_velocity_table
from profshape.exceptions import InputDataError
from profshape.forward.base import Prediction
from profshape.shapes import get_family

SETTINGS = settings(max_examples=80, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.function_scoped_fixture])
any_float = st.floats(allow_nan=True, allow_infinity=True, width=64)
FAMILIES = {"smooth_step": {"channel_length_m": 0.024}, "log_well": {"channel_length_m": 0.024},
            "log_spline": {"channel_length_m": 0.024, "domain_length_m": 0.06}}


def _tally(tally, refused: bool) -> None:
    tally.add("property_refused", int(refused))


@SETTINGS
@given(n=st.integers(0, 12), data=st.data())
def test_ion_velocity_profile_valid_or_clear_error(n, data, tally):
    z = data.draw(st.lists(any_float, min_size=n, max_size=n))
    v = data.draw(st.lists(any_float, min_size=n, max_size=n))
    s = data.draw(st.lists(any_float, min_size=n, max_size=n))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            prof = IonVelocityProfile(z, v, s, source="generated")
    except InputDataError as exc:
        assert "generated" in str(exc)
        _tally(tally, True)
        return
    assert np.all(np.isfinite(prof.z_m)) and np.all(np.isfinite(prof.velocity_m_s))
    assert np.all(prof.sigma_m_s > 0) and np.all(np.diff(prof.z_m) > 0)
    assert np.max(np.abs(prof.z_m)) <= 1.0  # metres, not millimetres


cell = st.one_of(any_float.map(repr), st.sampled_from(["", "abc", "1e5", "-0", "1,2", '"x"']))


@SETTINGS
@given(rows=st.lists(st.lists(cell, min_size=1, max_size=4), min_size=0, max_size=8),
       header=st.sampled_from(["z_m,ion_velocity_m_s,sigma_ion_velocity_m_s", "z_m,v,s", "",
                               "z_m,ion_velocity_m_s,sigma_ion_velocity_m_s,sigma_z_m"]))
def test_ion_velocity_file_valid_or_clear_error(rows, header, tmp_path_factory, tally):
    path = tmp_path_factory.mktemp("prop") / "lif.csv"
    path.write_text(header + "\n" + "\n".join(",".join(r) for r in rows))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            prof = read_ion_velocity_table(path)
    except InputDataError as exc:
        assert str(path) in str(exc)
        _tally(tally, True)
        return
    assert len(prof) >= 1 and np.all(np.isfinite(prof.velocity_m_s))
    ref = pd.read_csv(io.StringIO(path.read_text()))  # pandas as the reference reader
    assert len(ref) == len(prof)  # nothing dropped silently


@SETTINGS
@given(family=st.sampled_from(sorted(FAMILIES)), data=st.data())
def test_coefficients_valid_or_clear_error(family, data, tally):
    fam = get_family(family, **FAMILIES[family])
    n = data.draw(st.integers(0, fam.n_coefficients + 1))
    c = data.draw(st.lists(any_float, min_size=n, max_size=n))
    z = np.linspace(0.0, 0.06, 31)
    try:
        values = fam.evaluate(np.array(c, dtype=float), z)
    except InputDataError as exc:
        assert any(name in str(exc) for name in (*fam.names, "shape", "coefficient"))
        _tally(tally, True)
        return
    assert len(c) == fam.n_coefficients
    assert np.all(np.isfinite(values)) and np.all(values > 0)


@SETTINGS
@given(data=st.data())
def test_coefficients_inside_bounds_always_give_a_finite_profile(data):
    fam = get_family("log_spline", channel_length_m=0.024, domain_length_m=0.06)
    u = np.array(data.draw(st.lists(st.floats(0.0, 1.0), min_size=fam.n_coefficients,
                                    max_size=fam.n_coefficients)))
    values = fam.profile(fam.from_unit(u))(np.linspace(0.0, 0.06, 61))
    assert np.all(np.isfinite(values)) and np.all(values > 0)


@SETTINGS
@given(n=st.integers(0, 6), m=st.integers(0, 6), data=st.data())
def test_a_prediction_marked_ok_is_always_usable(n, m, data):
    z = data.draw(st.lists(any_float, min_size=n, max_size=n))
    v = data.draw(st.lists(any_float, min_size=m, max_size=m))
    scal = data.draw(st.dictionaries(st.sampled_from(["thrust", "discharge_current"]), any_float))
    p = Prediction("ok", z, v, scal)
    if p.ok:
        assert p.z_m.shape == p.ion_velocity_m_s.shape and p.z_m.size >= 2
        assert np.all(np.isfinite(p.z_m)) and np.all(np.isfinite(p.ion_velocity_m_s))
        assert np.all(np.diff(p.z_m) > 0)
        assert all(math.isfinite(x) for x in p.scalars.values())
    else:
        assert p.status == "failed" and p.reason.startswith("invalid prediction")
