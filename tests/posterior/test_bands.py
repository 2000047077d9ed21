"""Credible bands and scalar predictions against the linear-Gaussian closed form."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from profshape.exceptions import InputDataError
from profshape.forward.base import Prediction
from profshape.operating_point import OperatingPoint
from profshape.posterior import PosteriorBands, posterior_bands, predict_scalars
from profshape.problem import CalibrationProblem

from ._linear import (
    GAIN_M_S,
    GRID_M,
    SCALAR_NAMES,
    V0_M_S,
    LinearVelocityModel,
    design_matrix,
    exact_posterior,
    log10_profile,
)


@pytest.fixture(scope="module")
def bands(linear_case, linear_posterior):
    problem, _ = linear_case
    return posterior_bands(problem, linear_posterior, levels=(0.68, 0.95), n_draws=64, seed=3)


def test_profile_band_matches_closed_form(linear_case, bands):
    # log10 profile = Phi(z) c is Gaussian with variance Phi Sigma Phi^T under the exact
    # posterior (Bishop 2006 section 3.3, predictive eq. 3.59 without noise); the 68 % and
    # 95 % central quantiles are mean -/+ 0.994 sd and 1.960 sd (scipy.stats.norm.ppf).
    problem, _ = linear_case
    mean, cov = exact_posterior(problem)
    prof = bands.profile
    assert set(prof["label"]) == {"300V"}
    assert set(prof["quantity"]) == {"frequency_hz"}
    z = prof["z_m"].to_numpy()
    basis = design_matrix(z, 1) / GAIN_M_S
    m = basis @ mean
    sd = np.sqrt(np.einsum("ij,jk,ik->i", basis, cov, basis))
    for level in (0.68, 0.95):
        q = stats.norm.ppf(0.5 + level / 2)
        half = 0.5 * (np.log10(prof[f"upper_{level:g}"]) - np.log10(prof[f"lower_{level:g}"]))
        # 1000 draws: quantile standard error of a few percent (common practice, no source)
        np.testing.assert_allclose(half, q * sd, rtol=0.15)
    np.testing.assert_allclose(np.log10(prof["median"]), m, atol=0.15 * sd.max())
    assert np.all(prof["lower_0.95"] <= prof["lower_0.68"])
    assert np.all(prof["upper_0.68"] <= prof["upper_0.95"])


def test_ion_velocity_band_matches_closed_form(linear_case, bands):
    # Ion velocity V0 + G Phi(z) c: Gaussian with sd G sqrt(Phi Sigma Phi^T) (Bishop 2006 3.3).
    problem, _ = linear_case
    mean, cov = exact_posterior(problem)
    iv = bands.ion_velocity
    np.testing.assert_allclose(iv["z_m"], GRID_M)
    phi = design_matrix(GRID_M, 1)
    sd = np.sqrt(np.einsum("ij,jk,ik->i", phi, cov, phi))
    half = 0.5 * (iv["upper_0.68"] - iv["lower_0.68"]).to_numpy()
    # 64 draws: the 16/84 % quantiles carry about 20 % relative error (common practice, no source)
    np.testing.assert_allclose(half, sd, rtol=0.35)
    np.testing.assert_allclose(iv["median"], V0_M_S + phi @ mean, atol=0.5 * sd.max())
    assert bands.n_draws == 64 and bands.n_ok == 64 and bands.n_failed == 0
    assert np.all(iv["n_ok"] == 64)


def test_scalar_table_matches_closed_form(linear_case, linear_posterior, bands):
    # thrust = 0.08 (1 + 0.1 mean log10 profile) with mean over the symmetric grid = c0
    # (Legendre P1 averages to zero): posterior median and sd follow from c0's posterior.
    problem, _ = linear_case
    mean, cov = exact_posterior(problem)
    table = bands.scalars
    assert set(table["name"]) == set(SCALAR_NAMES)
    thrust = table.set_index("name").loc["thrust"]
    assert thrust["unit"] == "N"
    np.testing.assert_allclose(thrust["median"], 0.08 * (1 + 0.1 * mean[0]),
                               atol=3 * 0.008 * np.sqrt(cov[0, 0]))
    np.testing.assert_allclose(thrust["std"], 0.008 * np.sqrt(cov[0, 0]), rtol=0.35)
    assert thrust["lower_0.95"] < thrust["lower_0.68"] < thrust["median"] < thrust["upper_0.68"]


def test_bands_roundtrip(bands, tmp_path):
    bands.save(tmp_path)
    back = PosteriorBands.load(tmp_path)
    assert back.levels == (0.68, 0.95)
    assert back.n_draws == bands.n_draws
    np.testing.assert_allclose(back.ion_velocity["median"], bands.ion_velocity["median"])


class _FailAboveModel(LinearVelocityModel):
    """Fails (not converged) when the profile's mean log10 level exceeds a threshold."""

    def __init__(self, threshold: float) -> None:
        self.threshold = threshold

    def run(self, profile, point):
        if float(np.mean(np.log10(profile(GRID_M)))) > self.threshold:
            return Prediction.failure("not_converged", "level above test threshold")
        return super().run(profile, point)


def test_failed_draws_are_counted_not_averaged(linear_case, linear_posterior):
    problem, _ = linear_case
    threshold = float(np.median(linear_posterior.samples["c0"]))
    flaky = CalibrationProblem(problem.family, problem.dataset, _FailAboveModel(threshold))
    result = posterior_bands(flaky, linear_posterior, n_draws=40, seed=11)
    draws = result.draws
    expected_fail = int(np.sum(draws["c0"] > threshold))
    assert 5 < expected_fail < 35
    assert result.n_failed == expected_fail
    assert result.n_ok == 40 - expected_fail
    assert set(draws.loc[draws["status"] != "ok", "status"]) == {"not_converged"}
    assert np.all(result.ion_velocity["n_ok"] <= result.n_ok)
    # only the ok draws enter the scalar table and the velocity band
    assert np.all(result.scalars["n_ok"] == result.n_ok)
    assert np.all(result.scalars["n_failed"] == expected_fail)
    assert np.isfinite(result.ion_velocity["median"]).all()


def test_predict_scalars_in_and_out_of_data(linear_case, linear_posterior):
    problem, _ = linear_case
    mean, cov = exact_posterior(problem)
    new = OperatingPoint("450V", 450.0, 5e-6)
    table = predict_scalars(problem, linear_posterior,
                            [problem.dataset.operating_points[0], new], n_draws=48, seed=2)
    assert set(table["label"]) == {"300V", "450V"}
    inside = table[table["label"] == "300V"]
    outside = table[table["label"] == "450V"]
    assert not inside["extrapolation"].any() and inside["in_data"].all()
    assert outside["extrapolation"].all() and not outside["in_data"].any()
    assert "discharge_voltage_V = 450 outside calibrated [300, 300]" in \
        outside["extrapolation_reason"].iloc[0]
    # thrust scales with V/300 in the test model: 0.08 * 1.5 * (1 + 0.1 c0)
    row = outside.set_index("name").loc["thrust"]
    np.testing.assert_allclose(row["median"], 0.12 * (1 + 0.1 * mean[0]),
                               atol=3 * 0.012 * np.sqrt(cov[0, 0]))
    assert row["n_ok"] == 48 and row["n_failed"] == 0
    assert set(outside["name"]) == set(SCALAR_NAMES)


def test_predict_and_bands_refuse_bad_input(linear_case, linear_posterior):
    problem, _ = linear_case
    with pytest.raises(InputDataError, match="n_draws must be an integer >= 1"):
        predict_scalars(problem, linear_posterior, n_draws=0)
    with pytest.raises(InputDataError, match="OperatingPoint"):
        predict_scalars(problem, linear_posterior, ["300V"])
    with pytest.raises(InputDataError, match="strictly between 0 and 1"):
        posterior_bands(problem, linear_posterior, levels=(95,))


def test_log10_profile_helper_is_legendre():
    # numpy's Legendre basis: P0 = 1, P1 = x (Abramowitz and Stegun 22.4.6 table)
    z = np.array([0.0, 0.025, 0.05])
    np.testing.assert_allclose(log10_profile(np.array([1.0, 2.0]), z)[0], [-1.0, 1.0, 3.0])


def test_executor_gives_the_same_bands(linear_case, linear_posterior):
    # Draws run as one task per draw on an executor (concurrent.futures from the standard
    # library as the reference) give exactly the serial result.
    from concurrent.futures import ThreadPoolExecutor

    problem, _ = linear_case
    serial = posterior_bands(problem, linear_posterior, n_draws=6, seed=9)
    with ThreadPoolExecutor(max_workers=2) as pool:
        parallel = posterior_bands(problem, linear_posterior, n_draws=6, seed=9, executor=pool)
        table = predict_scalars(problem, linear_posterior, n_draws=4, executor=pool, seed=1)
    np.testing.assert_allclose(parallel.ion_velocity["median"], serial.ion_velocity["median"])
    np.testing.assert_allclose(parallel.scalars["median"], serial.scalars["median"])
    assert (table["n_ok"] == 4).all()


def test_bohm_profile_band_uses_device_field(linear_case, linear_posterior):
    # A Bohm-type family is converted with omega_ce = e B / m_e (NRL Plasma Formulary;
    # scipy.constants CODATA) from the forward model's device field map.
    from scipy import constants

    from profshape.shapes import CustomFamily

    from ._linear import BOUNDS, _profile_values

    class _Device:
        @staticmethod
        def magnetic_field(z_m):
            return 0.01 + 0.2 * np.asarray(z_m)

    class _ModelWithDevice(LinearVelocityModel):
        device = _Device()

    problem, _ = linear_case
    bohm = CustomFamily(_profile_values, {"c0": BOUNDS[0], "c1": BOUNDS[1]}, kind="bohm",
                        vectorized=True)
    bohm_problem = CalibrationProblem(bohm, problem.dataset, _ModelWithDevice())
    z = np.array([0.01, 0.03])
    result = posterior_bands(bohm_problem, linear_posterior, z_m=z, n_draws=0)
    assert set(result.profile["quantity"]) == {"frequency_hz"}
    coeff = 10.0 ** log10_profile(linear_posterior.map_vector, z)[0]
    omega = constants.e * (0.01 + 0.2 * z) / constants.m_e
    np.testing.assert_allclose(result.profile["map"], coeff * omega, rtol=1e-12)
