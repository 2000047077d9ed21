"""Time `profshape report` (figures, summary, report; no forward run) on a calibration folder.

Usage::

    python benchmarks/report_redraw.py RUN_FOLDER [--repeats 3]
    python benchmarks/report_redraw.py --pairs-dim 8      # the pairs plot alone, synthetic

Copies the folder (the report rewrites figures), rebuilds the report ``--repeats``
times in this process and prints the median wall time, the time per figure and the
peak resident memory. To compare two versions side by side on the same folder, run it
once with each on the PYTHONPATH, e.g.::

    PYTHONPATH=/path/to/old python benchmarks/report_redraw.py RUN
    PYTHONPATH=$PWD python benchmarks/report_redraw.py RUN
"""

from __future__ import annotations

import argparse
import resource
import shutil
import statistics
import tempfile
import time
from pathlib import Path


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("folder", nargs="?", help="a finished calibration folder")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--pairs-dim", type=int, help="time only the pairs plot of this many "
                        "coefficients (200 synthetic trials, 3000 posterior points, PNG + SVG)")
    args = parser.parse_args()
    if args.pairs_dim:
        _pairs_only(args.pairs_dim)
        return
    if not args.folder:
        parser.error("give a calibration folder or --pairs-dim")
    t0 = time.perf_counter()
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.figure

    import profshape
    from profshape.workflow import rebuild_report

    print(f"profshape from {Path(profshape.__file__).parent}; import {time.perf_counter() - t0:.2f} s")
    per_figure: dict[str, list[float]] = {}
    original = matplotlib.figure.Figure.savefig

    def timed_savefig(self, fname, *a, **k):  # time spent saving, per figure file
        s = time.perf_counter()
        out = original(self, fname, *a, **k)
        per_figure.setdefault(Path(str(fname)).name, []).append(time.perf_counter() - s)
        return out

    matplotlib.figure.Figure.savefig = timed_savefig
    walls = []
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp) / "run"
        shutil.copytree(args.folder, work)
        for _ in range(args.repeats):
            s = time.perf_counter()
            rebuild_report(work)
            walls.append(time.perf_counter() - s)
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"report rebuild: median {statistics.median(walls):.2f} s over {len(walls)} "
          f"(all: {', '.join(f'{w:.2f}' for w in walls)}); peak RSS {peak_mb:.0f} MB")
    for name, ts in sorted(per_figure.items()):
        print(f"  save {name:<22} median {statistics.median(ts):.2f} s")


def _pairs_only(d: int) -> None:
    import numpy as np
    import pandas as pd

    import profshape
    from profshape.plots import plot_pairs

    rng = np.random.default_rng(0)
    names = [f"log10_level_{k}" for k in range(d)]
    trials = pd.DataFrame({n: rng.uniform(0, 1, 200) for n in names})
    trials["status"] = "ok"
    trials["reduced_chi2"] = rng.uniform(1, 50, 200)
    post = pd.DataFrame({n: rng.normal(0.5, 0.1, 3000) for n in names})
    with tempfile.TemporaryDirectory() as tmp:
        t = time.perf_counter()
        plot_pairs(trials, names, post, paths=[Path(tmp) / "p.png", Path(tmp) / "p.svg"],
                   units=["log10(-)"] * d)
        wall = time.perf_counter() - t
    print(f"profshape from {Path(profshape.__file__).parent}: pairs plot d={d}, 200 trials, "
          f"3000 posterior points, PNG + SVG: {wall:.1f} s")


if __name__ == "__main__":
    main()
