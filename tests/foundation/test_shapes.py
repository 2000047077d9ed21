"""Shape families: evaluation, unit cube, vectorisation, validation."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.interpolate import PchipInterpolator

from profshape.exceptions import InputDataError
from profshape.shapes import (
    CustomFamily,
    LogSpline,
    LogWell,
    ScaledReference,
    SmoothStep,
    get_family,
)

Z = np.linspace(0.0, 0.0625, 97)


def _reference(z):
    return 0.01 + 0.05 * (z > 0.025)


def _custom(c, z):
    return 10.0 ** c[0] * (1.0 + c[1] * z / 0.06)


FAMILIES = [
    SmoothStep(),
    LogWell(),
    LogSpline(5),
    LogSpline(5, free_nodes=True),
    ScaledReference((np.array([0.0, 0.025, 0.0625]), np.array([0.005, 0.01, 0.08]))),
    ScaledReference(_reference),
    CustomFamily(_custom, {"log10_level": (-3.0, -1.0), "slope": (0.0, 4.0)}),
]
IDS = [f"{f.name}-{i}" for i, f in enumerate(FAMILIES)]


@pytest.mark.parametrize("family", FAMILIES, ids=IDS)
def test_metadata_consistent(family):
    d = family.n_coefficients
    assert len(family.names) == len(family.units) == d
    assert family.bounds.shape == (d, 2)
    assert np.all(family.bounds[:, 0] < family.bounds[:, 1])
    assert family.kind in ("bohm", "frequency")


@pytest.mark.parametrize("family", FAMILIES, ids=IDS)
def test_batch_matches_single_and_torch(family):
    c = family.sample(6, seed=3)
    batch = family.evaluate(c, Z)
    assert batch.shape == (6, Z.size)
    assert np.all(np.isfinite(batch)) and np.all(batch > 0)
    for i in range(6):
        np.testing.assert_allclose(family.evaluate(c[i], Z), batch[i], rtol=1e-12)
    tb = family.evaluate(torch.as_tensor(c, dtype=torch.float64), torch.as_tensor(Z))
    assert isinstance(tb, torch.Tensor) and tb.dtype == torch.float64
    np.testing.assert_allclose(tb.numpy(), batch, rtol=1e-10)


@pytest.mark.parametrize("family", FAMILIES, ids=IDS)
def test_profile_object(family):
    c = family.sample(1, seed=5)[0]
    prof = family.profile(c)
    assert prof.kind == family.kind
    assert set(prof.coefficients) == set(family.names)
    np.testing.assert_allclose(prof(Z), family.evaluate(c, Z))
    # The Bohm convention: anomalous frequency = coefficient x e B / m_e.
    # scipy.constants (CODATA 2018) is the reference for e / m_e.
    from scipy import constants

    if prof.kind == "bohm":
        np.testing.assert_allclose(
            prof.frequency(Z, np.full(Z.size, 0.02)),
            prof(Z) * constants.e * 0.02 / constants.m_e,
            rtol=1e-12,
        )


def test_spline_matches_scipy_pchip():
    # Reference implementation: scipy.interpolate.PchipInterpolator on the same nodes
    # (Fritsch-Carlson shape-preserving cubic Hermite interpolation).
    fam = LogSpline(6, free_nodes=True)
    c = fam.sample(20, seed=11)
    x = fam.node_positions(c)
    got = np.log10(fam.evaluate(c, Z))
    for i in range(c.shape[0]):
        ref = PchipInterpolator(x[i], c[i, :6])(Z)
        np.testing.assert_allclose(got[i], ref, atol=1e-12)


def test_spline_monotone_nodes_give_monotone_profile():
    fam = LogSpline(5)
    c = np.array([-3.5, -3.0, -2.0, -1.0, -0.8])
    v = fam.evaluate(c, Z)
    assert np.all(np.diff(v) >= -1e-15)
    assert v.min() >= 10**-3.5 * (1 - 1e-12) and v.max() <= 10**-0.8 * (1 + 1e-12)


def test_smooth_step_levels_and_midpoint():
    fam = SmoothStep()
    c = np.array([-3.0, -1.0, 0.025, 0.001])
    v = fam.evaluate(c, np.array([0.0, 0.025, 0.0625]))
    np.testing.assert_allclose(v, [1e-3, 10**-2.0, 1e-1], rtol=1e-6)


def test_log_well_depth():
    fam = LogWell()
    c = np.array([-1.0, 1.5, 0.02, 0.003])
    v = fam.evaluate(c, np.array([0.02, 0.06]))
    np.testing.assert_allclose(np.log10(v[0]), -2.5, atol=1e-12)
    assert np.log10(v[1]) == pytest.approx(-1.0, abs=1e-6)


def test_scaled_reference_scales():
    fam = ScaledReference(_reference)
    np.testing.assert_allclose(fam.evaluate(np.array([1.0]), Z), 10 * _reference(Z))


@settings(max_examples=60, deadline=None)
@given(st.sampled_from(range(len(FAMILIES))),
       st.lists(st.floats(0.0, 1.0), min_size=8, max_size=8))
def test_unit_cube_round_trip(index, u):
    family = FAMILIES[index]
    u = np.array(u[: family.n_coefficients])
    c = family.from_unit(u)
    family.validate(c)  # inside bounds
    np.testing.assert_allclose(family.to_unit(c), u, atol=1e-12)
    ct = family.from_unit(torch.as_tensor(u))
    np.testing.assert_allclose(ct.numpy(), c, rtol=1e-12)


@settings(max_examples=40, deadline=None)
@given(st.sampled_from(range(len(FAMILIES))), st.integers(1, 5), st.integers(0, 2**31 - 1))
def test_vectorisation_property(index, n, seed):
    family = FAMILIES[index]
    c = family.sample(n, seed=seed)
    out = family.evaluate(c, Z)
    assert out.shape == (n, Z.size)
    np.testing.assert_allclose(out[-1], family.evaluate(c[-1], Z), rtol=1e-12)


@pytest.mark.parametrize(
    ("coeffs", "match"),
    [
        ([-3.0, -1.0, 0.025], r"shape \(4,\)"),
        ([np.nan, -1.0, 0.025, 0.002], "log10_inner_level.*finite"),
        ([-3.0, -1.0, 0.5, 0.002], r"transition_z_m.*outside its bounds"),
        ([-9.0, -1.0, 0.025, 0.002], r"log10_inner_level.*outside its bounds"),
    ],
)
def test_validation_messages(coeffs, match):
    with pytest.raises(InputDataError, match=match):
        SmoothStep().validate(coeffs)


def test_bounds_checks():
    with pytest.raises(InputDataError, match="inverted"):
        SmoothStep(bounds={"transition_z_m": (0.03, 0.02)})
    with pytest.raises(InputDataError, match="zero-width"):
        SmoothStep().with_bounds(transition_width_m=(0.01, 0.01))
    with pytest.raises(InputDataError, match="unknown parameter"):
        SmoothStep().with_bounds(centre=(0.0, 1.0))
    fam = SmoothStep().with_bounds(transition_z_m=(0.02, 0.03))
    assert fam.bounds[2].tolist() == [0.02, 0.03]


def test_get_family_and_errors():
    assert isinstance(get_family("smooth_step", channel_length_m=0.03), SmoothStep)
    assert get_family("log_spline", n_nodes=3).n_coefficients == 3
    with pytest.raises(InputDataError, match="unknown family 'bezier'"):
        get_family("bezier")
    with pytest.raises(InputDataError, match="bad options"):
        get_family("log_well", n_nodes=3)


def test_custom_family_output_checked():
    bad = CustomFamily(lambda c, z: -np.ones_like(z), {"a": (0.0, 1.0)})
    with pytest.raises(InputDataError, match="non-positive"):
        bad.evaluate([0.5], Z)
    wrong = CustomFamily(lambda c, z: np.ones(3), {"a": (0.0, 1.0)})
    with pytest.raises(InputDataError, match="returned shape"):
        wrong.evaluate([0.5], Z)


def test_coefficient_dict_round_trip():
    fam = LogWell()
    c = fam.sample(1, seed=1)[0]
    d = fam.coefficient_dict(c)
    np.testing.assert_allclose(fam.validate(d), c)
    with pytest.raises(InputDataError, match="missing"):
        fam.validate({"log10_baseline": -1.0})
