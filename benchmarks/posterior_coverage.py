"""Coverage of the posterior profile band through the GP-surrogate path.

Repeats: synthetic data from a known linear-Gaussian truth (tests/posterior/_linear.py),
a search-like trial log (uniform design plus points around the optimum), then
``sample_posterior`` (default: the output emulator with its variance in the likelihood;
``--surrogate-of log_likelihood``: the log-likelihood GP and its realisations) and the
pointwise band of the log10 profile at three positions. For a flat prior the
central band is an exact confidence interval (Bishop 2006, section 3.3), so the
count of covering bands is Binomial(N, level) if the surrogate posterior is right.

Prints the coverage per position with the 95 % binomial range, the mean ratio of
band width to the closed-form width, and the wall time and forward runs per repeat.

Run:  /work/venv/bin/python benchmarks/posterior_coverage.py --repeats 40
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from posterior._linear import (
    design_matrix,
    exact_posterior,
    log10_profile,
    make_problem,
    make_trials,
)

from profshape.exceptions import ConvergenceWarning
from profshape.posterior import PosteriorSettings, sample_posterior
from profshape.posterior.bands import profile_band

Z_CHECK_M = np.array([0.002, 0.025, 0.048])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=40)
    parser.add_argument("--level", type=float, default=0.9)
    parser.add_argument("--method", choices=("surrogate", "exact"), default="surrogate")
    parser.add_argument("--gp-draws", type=int, default=4)
    parser.add_argument("--surrogate-of", choices=("outputs", "log_likelihood"),
                        default="outputs")
    args = parser.parse_args()
    truth = np.array([-1.0, 0.4])
    true_log10 = log10_profile(truth, Z_CHECK_M)[0]
    settings = PosteriorSettings(method=args.method, n_walkers=16, n_steps=800, burn_in=200,
                                 n_gp_draws=args.gp_draws, n_refine_draws=8, n_check_draws=8,
                                 surrogate_of=args.surrogate_of, seed=0)
    covered = np.zeros(len(Z_CHECK_M), dtype=int)
    width_ratio = []
    times, runs, check_fail = [], [], 0
    q = stats.norm.ppf(0.5 + args.level / 2)
    basis = design_matrix(Z_CHECK_M, 1) / design_matrix(Z_CHECK_M, 1)[0, 0]
    for rep in range(args.repeats):
        problem, _ = make_problem(truth, seed=1000 + rep)
        trials = make_trials(problem, seed=rep)
        start = time.perf_counter()
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            post = sample_posterior(problem, trials, settings)
        times.append(time.perf_counter() - start)
        runs.append(post.diagnostics["n_forward_runs"])
        if post.check is not None and not post.check.passed:
            check_fail += 1
            print(f"  repeat {rep + 1}: {post.check.message}")
        _ = [w for w in caught if issubclass(w.category, ConvergenceWarning)]
        values = log10_profile(post.samples.to_numpy(), Z_CHECK_M)
        band = profile_band(values, Z_CHECK_M, levels=(args.level,))
        lo = band[f"lower_{args.level:g}"].to_numpy()
        hi = band[f"upper_{args.level:g}"].to_numpy()
        covered += (lo <= true_log10) & (true_log10 <= hi)
        _, cov = exact_posterior(problem)
        sd = np.sqrt(np.einsum("ij,jk,ik->i", basis, cov, basis))
        width_ratio.append((hi - lo) / (2 * q * sd))
        print(f"  repeat {rep + 1}: covered so far {covered.tolist()}, {times[-1]:.1f} s",
              flush=True)
    lo_b, hi_b = stats.binom.interval(0.95, args.repeats, args.level)
    print(f"method={args.method} surrogate_of={args.surrogate_of} repeats={args.repeats} "
          f"level={args.level} gp_draws={args.gp_draws}")
    for z, c in zip(Z_CHECK_M, covered, strict=True):
        flag = "ok" if lo_b <= c <= hi_b else "OUTSIDE"
        print(f"  z = {1e3 * z:5.1f} mm: covered {c}/{args.repeats} = {c / args.repeats:.3f} "
              f"(95 % binomial range {lo_b:.0f}-{hi_b:.0f}) {flag}")
    wr = np.array(width_ratio)
    print(f"  band width / closed-form width: mean {wr.mean():.3f}, "
          f"range {wr.min():.3f}-{wr.max():.3f}")
    print(f"  wall time per repeat: mean {np.mean(times):.2f} s; forward runs per repeat: "
          f"{np.mean(runs):.0f}; predictive checks failed: {check_fail}/{args.repeats}")


if __name__ == "__main__":
    main()
