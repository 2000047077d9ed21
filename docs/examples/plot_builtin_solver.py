"""
One coarse run of the built-in solver
=====================================

The built-in forward model is a 1-D axial discharge solver. This example runs
it once on the invented demo device at 300 V with the default anomalous
profile (a smooth step of the Bohm-like coefficient) on a coarse grid, and
plots the axial profiles it returns. The first call compiles the numerical
kernels (cached on disk afterwards).
"""

import time

import matplotlib.pyplot as plt

from profshape.solver import SolverSettings, default_profile, demo_device, demo_operating_points, solve

device = demo_device()
point = demo_operating_points()[0]  # 300 V, 4.5 mg/s xenon
profile = default_profile(device)

start = time.perf_counter()
result = solve(device, point, profile, SolverSettings(n_cells=60))
print(f"status {result.status!r} ({result.reason}) in {time.perf_counter() - start:.1f} s")
for key in ("discharge_current_A", "thrust_N", "discharge_power_W"):
    print(f"{key}: {result.globals[key]:.4g}")

# %%
# Cell-centred profiles along the axis.
cells = result.cells
z_mm = 1e3 * cells["z_m"]
fig, axes = plt.subplots(1, 3, figsize=(10, 3.0), layout="constrained")
for ax, column, label in zip(
    axes,
    ["ion_velocity_m_s", "electron_temperature_eV", "anomalous_frequency_per_s"],
    ["ion velocity [m/s]", "electron temperature [eV]", "anomalous frequency [1/s]"],
    strict=True,
):
    ax.plot(z_mm, cells[column])
    ax.set_xlabel("z [mm]")
    ax.set_ylabel(label)
    ax.axvline(1e3 * device.channel_length_m, color="0.5", ls=":", lw=1)
axes[2].set_yscale("log")
