"""Stage times of the demo calibration: search against posterior, side by side in one run.

Runs the bundled demo (``profshape demo``'s calibration file, its default budget unless
``--budget``) and prints, per stage, the wall time, the calibration process's own CPU
time (forward runs go to the worker processes, so this is the stage's cost excluding
forward runs), the number of forward runs and the wait for them.

    python benchmarks/demo_stages.py                 # default budget, 2 workers
    python benchmarks/demo_stages.py --budget 20 --out /tmp/stages

The posterior stage is split into sampling (``sample_posterior``: refinement, MAP,
check), bands and predictions, and the figures/summary/report. The goal of the
posterior's cost (issue 10): its wall time excluding forward runs at most the search's.
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")


class _Clock:
    """Wall and own-CPU time of wrapped calls, and the wall time spent in forward runs."""

    def __init__(self) -> None:
        self.rows: dict[str, list[float]] = {}
        self.forward_wait = 0.0
        self.forward_runs = 0

    def wrap(self, name, fn):
        def timed(*args, **kwargs):
            w0, c0, f0 = time.perf_counter(), time.process_time(), self.forward_wait
            try:
                return fn(*args, **kwargs)
            finally:
                row = self.rows.setdefault(name, [0.0, 0.0, 0.0])
                row[0] += time.perf_counter() - w0
                row[1] += time.process_time() - c0
                row[2] += self.forward_wait - f0
        return timed

    def wrap_forward(self, fn):
        def timed(problem, coefficients, *args, **kwargs):
            w0 = time.perf_counter()
            out = fn(problem, coefficients, *args, **kwargs)
            self.forward_wait += time.perf_counter() - w0
            self.forward_runs += len(out)
            return out
        return timed


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--budget", type=int, default=None, help="search budget (demo default)")
    parser.add_argument("--workers", type=int, default=None, help="workers (demo default 2)")
    parser.add_argument("--out", default=None, help="output folder (default: a temporary one)")
    args = parser.parse_args()

    import pandas as pd

    from profshape import posterior as post_pkg
    from profshape.cli import demo_config_text
    from profshape.config import parse_config
    from profshape.posterior import _evaluate, bands, sample
    from profshape.search import run_search
    from profshape.workflow import after_search, build_calibration, open_output_folder, report
    from profshape.workflow.layout import TRIALS_FILE
    from profshape.workflow.run import finish, make_executor

    clock = _Clock()
    for mod in (sample, bands):
        mod.evaluate_many = clock.wrap_forward(mod.evaluate_many)
    post_pkg.sample_posterior = clock.wrap("posterior: sampling", post_pkg.sample_posterior)
    post_pkg.posterior_bands = clock.wrap("posterior: bands", post_pkg.posterior_bands)
    post_pkg.predict_scalars = clock.wrap("posterior: predictions", post_pkg.predict_scalars)
    report.write_outputs = clock.wrap("figures, summary, report", report.write_outputs)
    after_search._save_stage = clock.wrap("posterior: emulated bands", after_search._save_stage)
    after_search._write_checks = clock.wrap("checks", after_search._write_checks)
    del _evaluate

    text, folder = demo_config_text(args.budget, None, args.workers)
    here = Path(__file__).resolve().parents[1] / "data_demo"
    if (here / "demo.toml").exists() and here != folder:
        # a source checkout: its own demo files, with the same overrides
        import profshape.cli.calibration as cli_mod

        real = cli_mod.demo_data_folder
        cli_mod.demo_data_folder = lambda: here
        try:
            text, folder = demo_config_text(args.budget, None, args.workers)
        finally:
            cli_mod.demo_data_folder = real
    cfg = parse_config(text, path=folder / "demo.toml", base_dir=folder)
    out = Path(args.out) if args.out else Path(tempfile.mkdtemp(prefix="demo-stages-")) / "run"
    from contextlib import ExitStack

    t_all = time.perf_counter()
    out = open_output_folder(cfg, out)
    cal = build_calibration(cfg, out, progress=False)
    with ExitStack() as stack:
        executor = make_executor(cfg, stack)
        w0, c0 = time.perf_counter(), time.process_time()
        result = run_search(cal.problem, cal.search_settings, out / TRIALS_FILE,
                            executor=executor)
        search_wall, search_cpu = time.perf_counter() - w0, time.process_time() - c0
        w0 = time.perf_counter()
        summary = finish(cal, result, out, executor=executor)
        finish_wall = time.perf_counter() - w0
    total = time.perf_counter() - t_all
    trials = result.trials
    run_s = float(pd.to_numeric(trials["wall_time_s"], errors="coerce").sum())
    print(f"demo: budget {cal.search_settings.budget}, {cfg.section('workers')['n_workers']} "
          f"workers, output {out}")
    print(f"{'stage':28s} {'wall s':>8s} {'own CPU s':>10s} {'fwd wait s':>10s} "
          f"{'wall - fwd':>10s}")
    n_workers = int(cfg.section("workers")["n_workers"])
    search_fwd = run_s / max(n_workers, 1)  # the trials run n_workers at a time
    print(f"{'search':28s} {search_wall:8.1f} {search_cpu:10.1f} {search_fwd:10.1f} "
          f"{search_wall - search_fwd:10.1f}   ({len(trials)} trials; forward wait estimated "
          f"as summed trial wall time {run_s:.1f} s / {n_workers} workers)")
    post_wall = post_cpu = post_fwd = 0.0
    for name, (wall, cpu, fwd) in clock.rows.items():
        print(f"{name:28s} {wall:8.1f} {cpu:10.1f} {fwd:10.1f} {wall - fwd:10.1f}")
        if name.startswith("posterior"):
            post_wall, post_cpu, post_fwd = post_wall + wall, post_cpu + cpu, post_fwd + fwd
    print(f"{'posterior stage (sum)':28s} {post_wall:8.1f} {post_cpu:10.1f} {post_fwd:10.1f} "
          f"{post_wall - post_fwd:10.1f}   ({clock.forward_runs} forward runs)")
    print("  (predictions submit their forward runs to the workers directly: their wall time "
          "is forward time, their own CPU ~0)")
    print(f"{'finish (all after search)':28s} {finish_wall:8.1f}")
    print(f"{'whole demo':28s} {total:8.1f}")
    print(f"posterior own CPU / search own CPU: {post_cpu / max(search_cpu, 1e-9):.2f}")
    post = summary.get("posterior") or {}
    print(f"best reduced chi-square {summary.get('best_reduced_chi2')}; posterior forward runs "
          f"{post.get('forward_runs')}; ESS {post.get('effective_sample_size')}, tau "
          f"{post.get('autocorr_time_steps')} steps")
    for c in summary.get("checks") or []:
        print(f"check {c['name']}: {'passed' if c['passed'] else 'FAILED'}")


if __name__ == "__main__":
    main()
