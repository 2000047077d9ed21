"""A cheap analytic calibration problem whose ion velocity is linear in the coefficients.

The family is ``log10 profile(z) = sum_k c_k P_k(zeta)`` with Legendre
polynomials ``P_k`` of the scaled axis ``zeta = 2 z / L - 1`` (degree 0: a
constant level; 1: a tilted line; 2: curved). The forward model's ion velocity
is ``v(z) = V0 + G * log10 profile(z)``, so the velocity is linear in the
coefficients and the Gaussian likelihood makes the posterior exactly Gaussian
under a flat prior (Bishop 2006, Pattern Recognition and Machine Learning,
section 3.3, with the prior precision alpha -> 0).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.polynomial import legendre

from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.forward.base import ForwardModel, Prediction
from profshape.operating_point import OperatingPoint
from profshape.posterior._evaluate import evaluate_many, runs_to_frame
from profshape.problem import CalibrationProblem
from profshape.shapes import CustomFamily

LENGTH_M = 0.05
V0_M_S = 12_000.0
GAIN_M_S = 2_000.0
GRID_M = np.linspace(0.0, LENGTH_M, 41)
SCALAR_NAMES = (
    "discharge_current", "thrust", "specific_impulse", "anode_efficiency",
    "mass_utilization", "voltage_utilization", "exit_ion_energy_eV",
)


def zeta(z_m: np.ndarray) -> np.ndarray:
    return 2.0 * np.asarray(z_m, dtype=float) / LENGTH_M - 1.0


def log10_profile(c: np.ndarray, z_m: np.ndarray) -> np.ndarray:
    """(n, k) coefficients → (n, n_z) log10 profile values."""
    c2 = np.atleast_2d(c)
    basis = legendre.legvander(zeta(z_m), c2.shape[1] - 1)  # (n_z, k)
    return c2 @ basis.T


def _profile_values(c: np.ndarray, z_m: np.ndarray) -> np.ndarray:
    return 10.0 ** log10_profile(c, z_m)


BOUNDS = {0: (-2.0, 0.0), 1: (-0.6, 1.4), 2: (-0.8, 0.8), 3: (-0.8, 0.8)}


def family(degree: int) -> CustomFamily:
    """Legendre log-profile family of the given degree (degree + 1 coefficients)."""
    params = {f"c{k}": BOUNDS[k] for k in range(degree + 1)}
    return CustomFamily(_profile_values, params, kind="frequency", name=f"legendre{degree}",
                        units={n: "log10(1/s)" for n in params}, vectorized=True)


class LinearVelocityModel(ForwardModel):
    """Ion velocity ``V0 + G * log10(profile)`` on a fixed grid, plus smooth scalars."""

    name = "linear-velocity"
    version = "1"

    def grid(self, point: OperatingPoint) -> np.ndarray:
        return GRID_M

    def run(self, profile, point: OperatingPoint) -> Prediction:
        g = np.log10(profile(GRID_M))
        scale = point.discharge_voltage_V / 300.0
        v = scale * (V0_M_S + GAIN_M_S * g)
        mean_g = float(np.mean(g))
        scalars = {
            "discharge_current": 4.0 * (1.0 + 0.2 * mean_g) * point.anode_mass_flow_kg_s / 5e-6,
            "thrust": 0.08 * scale * (1.0 + 0.1 * mean_g),
            "specific_impulse": 1600.0 * scale * (1.0 + 0.1 * mean_g),
            "anode_efficiency": 0.5 + 0.05 * mean_g,
            "mass_utilization": 0.9 + 0.02 * mean_g,
            "voltage_utilization": 0.88 + 0.03 * mean_g,
            "exit_ion_energy_eV": 0.88 * point.discharge_voltage_V * (1 + 0.03 * mean_g),
        }
        return Prediction("ok", z_m=GRID_M.copy(), ion_velocity_m_s=v, scalars=scalars)


def design_matrix(z_m: np.ndarray, degree: int, voltage_V: float = 300.0) -> np.ndarray:
    """d v / d c at the measurement positions, shape (n_z, degree + 1)."""
    return (voltage_V / 300.0) * GAIN_M_S * legendre.legvander(zeta(z_m), degree)


def make_problem(
    truth: np.ndarray,
    *,
    degree: int | None = None,
    n_z: int = 12,
    sigma_m_s: float = 400.0,
    seed: int = 0,
    points: tuple[tuple[str, float], ...] = (("300V", 300.0),),
) -> tuple[CalibrationProblem, dict[str, np.ndarray]]:
    """Synthetic data from ``truth`` (Legendre coefficients) with Gaussian noise."""
    truth = np.asarray(truth, dtype=float)
    degree = len(truth) - 1 if degree is None else degree
    rng = np.random.default_rng(seed)
    z = np.linspace(0.004, LENGTH_M - 0.004, n_z)
    items, observed = [], {}
    for label, voltage in points:
        v_true = (voltage / 300.0) * (V0_M_S + GAIN_M_S * log10_profile(truth, z)[0])
        v_obs = v_true + sigma_m_s * rng.standard_normal(n_z)
        observed[label] = v_obs
        op = OperatingPoint(label, voltage, 5e-6)
        items.append(OperatingPointData(op, IonVelocityProfile(z, v_obs, np.full(n_z, sigma_m_s))))
    problem = CalibrationProblem(family(degree), DataSet(items), LinearVelocityModel())
    return problem, observed


def exact_posterior(problem: CalibrationProblem) -> tuple[np.ndarray, np.ndarray]:
    """Closed-form posterior mean and covariance, flat prior (Bishop 2006, eqs. 3.53-3.54)."""
    degree = problem.family.n_coefficients - 1
    precision = np.zeros((degree + 1, degree + 1))
    rhs = np.zeros(degree + 1)
    for data in problem.dataset:
        iv = data.ion_velocity
        phi = design_matrix(iv.z_m, degree, data.point.discharge_voltage_V)
        beta = 1.0 / iv.sigma_m_s**2
        offset = data.point.discharge_voltage_V / 300.0 * V0_M_S
        precision += phi.T @ (beta[:, None] * phi)
        rhs += phi.T @ (beta * (iv.velocity_m_s - offset))
    cov = np.linalg.inv(precision)
    return cov @ rhs, cov


def make_trials(
    problem: CalibrationProblem, n_design: int = 24, n_local: int = 48, seed: int = 0,
    spread: float = 4.0,
) -> pd.DataFrame:
    """A search-like trial log: a uniform design plus points around the optimum.

    The local points are spread ``spread`` posterior standard deviations
    around the least-squares optimum, as a converging search leaves them.
    """
    rng = np.random.default_rng(seed)
    b = problem.bounds
    mean, cov = exact_posterior(problem)
    design = b[:, 0] + rng.random((n_design, problem.dim)) * (b[:, 1] - b[:, 0])
    local = rng.multivariate_normal(mean, spread**2 * cov, size=n_local)
    coeffs = np.clip(np.vstack([design, local]), b[:, 0], b[:, 1])
    runs = evaluate_many(problem, coeffs)
    frame = runs_to_frame(problem, coeffs, runs, "test")
    frame.insert(0, "trial", np.arange(len(frame)))
    return frame
