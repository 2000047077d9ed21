"""Run the tests that assert a search outcome over seeds 0-9 (issue: platform-robust tests).

Not collected by pytest (no ``test_`` prefix); run it by hand::

    PYTHONPATH=$PWD OMP_NUM_THREADS=1 python tests/search/sweep_seeds.py [--seeds 0-9] [--only NAME]

For every check and seed it prints pass/fail and the margin (for the
synthetic-truth recovery: the coefficient error over its tolerance, 1 = on the
edge; for the test functions: the best value's gap to the optimum over the
allowed gap). A check is kept as a test only if it passes for all seeds with margin.
"""

from __future__ import annotations

import argparse
import importlib.util
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import torch

HERE = Path(__file__).resolve().parent


def _load(path: Path, name: str):
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    sys.path.insert(0, str(path.parent))
    spec.loader.exec_module(mod)
    return mod


#: Keyword arguments of ``check_synthetic_truth`` (``--truth-z``, ``--target``); empty: the test's.
SYNTHETIC: dict = {}


def synthetic_truth(seed: int) -> str:
    mod = _load(HERE.parent / "forward" / "test_builtin.py", "_tb")
    with tempfile.TemporaryDirectory() as tmp:
        res, margins = mod.check_synthetic_truth(Path(tmp), seed=seed, **SYNTHETIC)
    return (f"best reduced chi2 {res.best_reduced_chi2:.3g} after {res.n_trials} trials; "
            "error / tolerance " + ", ".join(f"{k} {v:.2f}" for k, v in margins.items()))


def _engine():
    return _load(HERE / "test_engine.py", "_te")


def branin(seed: int) -> str:
    from botorch.test_functions import Branin

    te = _engine()
    fn = Branin()
    s = te._drive(fn, te._fast(budget=40, seed=seed))
    gap = (s.best().value - fn.optimal_value) / (0.01 * fn.optimal_value)
    assert gap <= 1.0, gap
    return f"best {s.best().value:.5f}; gap / allowed {gap:.2f}"


def hartmann6(seed: int) -> str:
    from botorch.test_functions import Hartmann

    te = _engine()
    fn = Hartmann(dim=6)
    s = te._drive(fn, te._fast(budget=45, seed=seed, num_restarts=3, raw_samples=96))
    gap = (s.best().value - fn.optimal_value) / (0.05 * abs(fn.optimal_value))
    assert gap <= 1.0, gap
    return f"best {s.best().value:.4f}; gap / allowed {gap:.2f}"


def posterior_band(seed: int) -> str:
    """tests/posterior/test_bands.py::test_profile_band_matches_closed_form with the
    fixture's sampler seed 5 + 1000 seed and the bands' seed 3 + 1000 seed."""
    import warnings

    from scipy import stats

    sys.path.insert(0, str(HERE.parent.parent))
    from profshape.posterior import PosteriorSettings, posterior_bands, sample_posterior
    from tests.posterior._linear import (
        GAIN_M_S,
        design_matrix,
        exact_posterior,
        make_problem,
        make_trials,
    )

    problem, _ = make_problem(np.array([-1.0, 0.4]), seed=3)
    trials = make_trials(problem, seed=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        post = sample_posterior(problem, trials, PosteriorSettings(
            method="exact", n_walkers=16, n_steps=2500, burn_in=300, n_check_draws=4,
            seed=5 + 1000 * seed))
        prof = posterior_bands(problem, post, levels=(0.68, 0.95), n_draws=0,
                               seed=3 + 1000 * seed).profile
    mean, cov = exact_posterior(problem)
    basis = design_matrix(prof["z_m"].to_numpy(), 1) / GAIN_M_S
    sd = np.sqrt(np.einsum("ij,jk,ik->i", basis, cov, basis))
    margins = {}
    for level in (0.68, 0.95):
        half = 0.5 * (np.log10(prof[f"upper_{level:g}"]) - np.log10(prof[f"lower_{level:g}"]))
        q = stats.norm.ppf(0.5 + level / 2)
        margins[f"width {level:g}"] = float(np.max(np.abs(half / (q * sd) - 1)) / 0.15)
    margins["median"] = float(np.max(np.abs(np.log10(prof["median"]) - basis @ mean))
                              / (0.15 * sd.max()))
    assert max(margins.values()) <= 1.0, margins
    return "error / tolerance " + ", ".join(f"{k} {v:.2f}" for k, v in margins.items())


CHECKS = {"synthetic_truth": synthetic_truth, "branin": branin, "hartmann6": hartmann6,
          "posterior_band": posterior_band}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", default="0-9")
    ap.add_argument("--only", default="")
    ap.add_argument("--truth-z", type=float, default=None,
                    help="synthetic truth's transition position, m (default: the test's)")
    ap.add_argument("--target", type=float, default=-1.0,
                    help="synthetic search's target reduced chi-square (0: none; default: "
                         "the test's)")
    args = ap.parse_args()
    if args.truth_z is not None:
        SYNTHETIC["truth_z_m"] = args.truth_z
    if args.target >= 0:
        SYNTHETIC["target"] = args.target or None
    lo, _, hi = args.seeds.partition("-")
    seeds = range(int(lo), int(hi or lo) + 1)
    torch.set_num_threads(1)
    for name, check in CHECKS.items():
        if args.only and args.only not in name:
            continue
        fails = 0
        for seed in seeds:
            t0 = time.perf_counter()
            try:
                msg = "pass: " + check(seed)
            except AssertionError as exc:
                fails += 1
                msg = f"FAIL: {exc}"
            print(f"{name:<16} seed {seed}: {msg} ({time.perf_counter() - t0:.0f} s)", flush=True)
        print(f"{name}: {len(seeds) - fails}/{len(seeds)} seeds pass", flush=True)
    np.seterr()


if __name__ == "__main__":
    main()
