"""Make the synthetic demo data of the invented "Sorrel-3" laboratory thruster.

The data are SYNTHETIC: a hidden truth profile (a smooth two-level Bohm-like
profile, below) is run through profshape's built-in solver on a grid twice as
fine as the default, sampled at LIF-like positions, and Gaussian noise with
typical LIF uncertainties is added (common practice, no source: a few hundred
m/s in velocity, a few tenths of a millimetre in position). Discharge currents
(and the thrust at 300 V) get 2 % noise.

Run from the repository root::

    python data_demo/make_demo_data.py

It rewrites operating_points.csv, ion_velocity.csv and scalars.csv here.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from profshape.data import DataSet, IonVelocityProfile, OperatingPointData, ScalarObservable
from profshape.shapes import SmoothStep
from profshape.solver import SolverSettings, demo_device, demo_operating_points, solve

HERE = Path(__file__).resolve().parent
SEED = 20261201

#: The hidden truth (a Bohm-like coefficient profile of the smooth_step family).
TRUTH = {
    "log10_inner_level": -2.2,
    "log10_outer_level": -1.1,
    "transition_z_m": 0.0255,
    "transition_width_m": 0.0025,
}
#: LIF positions [m] along the channel centre line (anode at 0, exit at 24 mm).
POSITIONS_M = np.array([4.0, 8.0, 12.0, 15.0, 18.0, 20.0, 22.0, 24.0, 26.0, 28.0,
                        31.0, 35.0, 40.0, 47.0, 55.0]) * 1e-3


def main() -> DataSet:
    rng = np.random.default_rng(SEED)
    device = demo_device()
    family = SmoothStep(channel_length_m=device.channel_length_m)
    profile = family.profile(family.coefficients_from_dict(TRUTH))
    fine = SolverSettings(n_cells=2 * SolverSettings().n_cells)
    points = []
    for point in demo_operating_points():
        result = solve(device, point, profile, fine)
        if not result.converged:  # "ok" or "oscillating" (averages over >= 5 periods)
            raise RuntimeError(f"truth solve failed at {point.label}: {result.reason}")
        v_true = np.interp(POSITIONS_M, result.z_m, result.ion_velocity_m_s)
        sigma_v = np.round(250.0 + 0.02 * np.abs(v_true), -1)  # [m/s]
        sigma_z = np.full(POSITIONS_M.size, 3e-4)  # [m]
        z_obs = POSITIONS_M  # nominal positions; their uncertainty enters via sigma_z
        slope = np.gradient(result.ion_velocity_m_s, result.z_m)
        dz = rng.normal(0.0, sigma_z)
        v_obs = v_true + np.interp(z_obs, result.z_m, slope) * dz + rng.normal(0.0, sigma_v)
        g = result.globals
        current = g["discharge_current_A"]
        scalars = {"discharge_current": ScalarObservable(
            "discharge_current", round(current * (1 + 0.02 * rng.normal()), 3),
            round(0.02 * current, 3), "A")}
        if point.label == "300V":
            thrust = g["thrust_N"]
            scalars["thrust"] = ScalarObservable(
                "thrust", round(thrust * (1 + 0.02 * rng.normal()), 5), round(0.02 * thrust, 5), "N")
        points.append(OperatingPointData(
            point, IonVelocityProfile(z_obs, np.round(v_obs, 0), sigma_v, sigma_z), scalars))
        print(f"{point.label}: true discharge current {current:.3f} A, thrust {g['thrust_N'] * 1e3:.2f} mN")
    dataset = DataSet(points)
    dataset.save(HERE)
    return dataset


if __name__ == "__main__":
    main()
