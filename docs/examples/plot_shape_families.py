"""
Shape families and their profiles
=================================

A shape family maps a few bounded coefficients to an anomalous collision
profile along the axis ``z`` (metres from the anode). Here each built-in
family draws five coefficient vectors from its bounds (a seeded uniform
sample) and evaluates them on a grid; the profiles are Bohm-like
coefficients, plotted on a log scale.
"""

import matplotlib.pyplot as plt
import numpy as np

from profshape.shapes import LogSpline, LogWell, SmoothStep

channel_length_m = 0.024
z_m = np.linspace(0.0, 0.06, 241)
families = [
    SmoothStep(channel_length_m=channel_length_m),
    LogSpline(n_nodes=5, channel_length_m=channel_length_m, domain_length_m=0.06),
    LogWell(channel_length_m=channel_length_m),
]

fig, axes = plt.subplots(1, len(families), figsize=(10, 3.2), sharey=True, layout="constrained")
for ax, family in zip(axes, families, strict=True):
    coefficients = family.sample(5, seed=0)  # (5, d), inside the bounds
    values = np.asarray(family.evaluate(coefficients, z_m))  # (5, n_z)
    for row in values:
        ax.semilogy(1e3 * z_m, row, lw=1.2)
    ax.axvline(1e3 * channel_length_m, color="0.5", ls=":", lw=1)
    ax.set_title(f"{family.name} ({family.n_coefficients} coefficients)")
    ax.set_xlabel("z [mm]")
axes[0].set_ylabel("Bohm-like coefficient")

# %%
# The coefficients, their units and bounds, as the calibration file names them:
for family in families:
    print(family.name)
    for p in family.parameters:
        print(f"  {p.name:<22s} [{p.lower:g}, {p.upper:g}] {p.unit}")

# %%
# The unit-cube map used by the search is a bijection of the bounds: a round
# trip returns the coefficients.
family = families[0]
c = family.sample(3, seed=1)
assert np.allclose(family.from_unit(family.to_unit(c)), c)
print(family.coefficient_dict(c[0]))
