"""Make the synthetic data of the "pressure" scenario: the invented "Orvanta-60" thruster.

The data are SYNTHETIC. A hidden, condition-dependent truth (a smooth_step
Bohm-like profile whose transition moves upstream and whose outer level rises
with the facility background pressure, and whose transition moves with the
discharge voltage; :data:`TRUTH_INTERCEPT`, :data:`TRUTH_SLOPE`) is run through
profshape's built-in solver at 3 background pressures x 2 discharge voltages,
on the same coarse grid the calibration uses (so the scenario tests the
statistics, not a discretisation error), and sampled: ion velocity (LIF-like
positions, a few hundred m/s noise, 0.3 mm position uncertainty), plasma
potential (5 V noise, probe-like positions), discharge current and thrust (2 %
noise) and the rms discharge-current oscillation amplitude (10 %). The noise
levels are common practice, no source.

Run from the repository root::

    python data_demo/pressure/make_pressure_data.py

It rewrites operating_points.csv, ion_velocity.csv, profiles.csv and
scalars.csv beside it, and truth.json (the hidden coefficients per point).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from profshape.data import (
    DataSet,
    IonVelocityProfile,
    OperatingPointData,
    ProfileMeasurement,
    ScalarObservable,
)
from profshape.operating_point import OperatingPoint
from profshape.shapes import SmoothStep
from profshape.solver import Device, SolverSettings, solve
from profshape.solver.device import BellField

HERE = Path(__file__).resolve().parent
SEED = 20261202
N_CELLS = 80  # the calibration file's [forward_model.solver] n_cells

#: Background pressures [Pa] and discharge voltages [V] of the six points.
PRESSURES_PA = (0.8e-3, 2.5e-3, 8.0e-3)
VOLTAGES_V = (250.0, 350.0)
MASS_FLOW_KG_S = 7.0e-6
#: The truth: coefficient = intercept + sum of slope * (feature - reference).
TRUTH_INTERCEPT = {"log10_inner_level": -2.2, "log10_outer_level": -1.1,
                   "transition_z_m": 0.0310, "transition_width_m": 0.0030}
REFERENCE = {"log10_p": math.log10(2.5e-3), "voltage": 300.0}
TRUTH_SLOPE = {  # per decade of pressure, and per volt
    ("transition_z_m", "log10_p"): -0.0020,
    ("log10_outer_level", "log10_p"): 0.15,
    ("transition_z_m", "voltage"): -4.0e-6,
}
VELOCITY_Z_M = np.array([6, 12, 18, 22, 26, 29, 32, 35, 39, 45, 55, 65]) * 1e-3
POTENTIAL_Z_M = np.array([20, 25, 30, 34, 38, 44, 52, 62]) * 1e-3


def device() -> Device:
    """The invented Orvanta-60 laboratory thruster."""
    return Device(channel_length_m=0.030, inner_radius_m=0.040, outer_radius_m=0.054,
                  domain_length_m=0.075,
                  magnetic_field=BellField(peak_T=0.020, peak_z_m=0.029, width_upstream_m=0.013,
                                           width_downstream_m=0.016),
                  anode_temperature_K=500.0, cathode_electron_temperature_eV=2.5,
                  name="Orvanta-60")


def truth_coefficients(point: OperatingPoint) -> dict[str, float]:
    """The hidden coefficients at ``point``."""
    feat = {"log10_p": math.log10(point.background_pressure_Pa) - REFERENCE["log10_p"],
            "voltage": point.discharge_voltage_V - REFERENCE["voltage"]}
    c = dict(TRUTH_INTERCEPT)
    for (coef, f), slope in TRUTH_SLOPE.items():
        c[coef] += slope * feat[f]
    return c


def points() -> list[OperatingPoint]:
    return [OperatingPoint(f"{int(v)}V_{p * 1e3:g}mPa", v, MASS_FLOW_KG_S, "xenon",
                           background_pressure_Pa=p)
            for p in PRESSURES_PA for v in VOLTAGES_V]


def main() -> DataSet:
    rng = np.random.default_rng(SEED)
    dev = device()
    family = SmoothStep(channel_length_m=dev.channel_length_m)
    settings = SolverSettings(n_cells=N_CELLS)
    out, truth = [], {}
    for point in points():
        coeffs = truth_coefficients(point)
        truth[point.label] = coeffs
        result = solve(dev, point, family.profile(family.coefficients_from_dict(coeffs)), settings)
        if not result.converged:
            raise RuntimeError(f"truth solve failed at {point.label}: {result.reason}")
        z, u = result.z_m, result.ion_velocity_m_s
        phi = result.cells["potential_V"].to_numpy()
        v_true = np.interp(VELOCITY_Z_M, z, u)
        sigma_v = np.round(250.0 + 0.02 * np.abs(v_true), -1)
        sigma_z = np.full(VELOCITY_Z_M.size, 3e-4)
        dz = rng.normal(0.0, sigma_z)
        v_obs = v_true + np.interp(VELOCITY_Z_M, z, np.gradient(u, z)) * dz + rng.normal(0, sigma_v)
        phi_obs = np.interp(POTENTIAL_Z_M, z, phi) + rng.normal(0.0, 5.0, POTENTIAL_Z_M.size)
        g = result.globals
        scalars = {}
        for name, key, rel in (("discharge_current", "discharge_current_A", 0.02),
                               ("thrust", "thrust_N", 0.02),
                               ("discharge_current_rms_amplitude", "oscillation_amplitude_A", 0.10)):
            value = float(g[key])
            scalars[name] = ScalarObservable(name, float(f"{value * (1 + rel * rng.normal()):.5g}"),
                                             float(f"{rel * value:.3g}"))
        out.append(OperatingPointData(
            point, IonVelocityProfile(VELOCITY_Z_M, np.round(v_obs), sigma_v, sigma_z), scalars,
            {"plasma_potential": ProfileMeasurement("plasma_potential", POTENTIAL_Z_M,
                                                    np.round(phi_obs, 1),
                                                    np.full(POTENTIAL_Z_M.size, 5.0))}))
        print(f"{point.label}: current {g['discharge_current_A']:.3f} A, thrust "
              f"{g['thrust_N'] * 1e3:.2f} mN, oscillation {g['oscillation_amplitude_A']:.3f} A")
    dataset = DataSet(out)
    dataset.save(HERE)
    (HERE / "truth.json").write_text(json.dumps(truth, indent=2) + "\n", encoding="utf-8")
    return dataset


if __name__ == "__main__":
    main()
