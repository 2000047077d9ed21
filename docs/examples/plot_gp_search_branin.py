"""
A Gaussian-process search on a published test function
=======================================================

The search engine works on any objective through its ask/tell interface.
This example minimises the Branin function (Dixon and Szegő 1978, as given in
the Virtual Library of Simulation Experiments of Surjanovic and Bingham), whose
global minimum 0.397887 is reached at (-pi, 12.275), (pi, 2.275) and
(9.42478, 2.475) on x1 in [-5, 10], x2 in [0, 15].

The scalar strategy (a GP of the objective with expected improvement) runs
with a small budget; the printed gap to the known minimum shows how close
it gets.
"""

import math

import matplotlib.pyplot as plt
import numpy as np

from profshape.search import Search, SearchSettings, SearchSpace

BRANIN_MINIMUM = 0.397887  # Surjanovic and Bingham, Branin function page


def branin(x1: float, x2: float) -> float:
    a, b, c = 1.0, 5.1 / (4 * math.pi**2), 5.0 / math.pi
    r, s, t = 6.0, 10.0, 1.0 / (8 * math.pi)
    return a * (x2 - b * x1**2 + c * x1 - r) ** 2 + s * (1 - t) * math.cos(x1) + s


space = SearchSpace(["x1", "x2"], [[-5.0, 10.0], [0.0, 15.0]])
settings = SearchSettings(budget=20, n_initial=6, objective_transform="identity",
                          strategy="trust_region", num_restarts=2, raw_samples=32,
                          seed=0, progress=False)
search = Search(space, settings)
while not search.stop_reason():
    for p in search.ask():
        search.tell(p.trial, branin(p.coefficients["x1"], p.coefficients["x2"]))

best = search.best()
print(f"best value {best.value:.5f} after {search.n_finished} evaluations "
      f"(known minimum {BRANIN_MINIMUM}, gap {best.value - BRANIN_MINIMUM:.2e})")
print("at", search.best_coefficients())

# %%
# The evaluated points over the function's contours; the three global minima
# are marked with crosses.
x1, x2 = np.meshgrid(np.linspace(-5, 10, 151), np.linspace(0, 15, 151))
f = np.vectorize(branin)(x1, x2)
obs = search.observations
pts = np.array([space.from_unit(o.u) for o in obs])
fig, ax = plt.subplots(figsize=(5.5, 4.2), layout="constrained")
cs = ax.contour(x1, x2, np.log10(f), levels=15, cmap="viridis")
ax.scatter(pts[:, 0], pts[:, 1], c=np.arange(len(pts)), cmap="autumn", s=22,
           edgecolors="k", linewidths=0.4, label="trials (colour: order)")
ax.plot([-math.pi, math.pi, 9.42478], [12.275, 2.275, 2.475], "kx", ms=9, label="global minima")
ax.set_xlabel("x1")
ax.set_ylabel("x2")
ax.legend(loc="upper right", fontsize=8)
