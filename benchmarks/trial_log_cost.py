"""Cost of logging one finished trial: the journal against a whole-table rewrite per trial.

Prints, side by side, the mean and worst wall time of ``TrialLog.append`` over a log
growing to N rows, for the journal (one fsync-ed JSON line per trial, the table
compacted every ``COMPACT_EVERY`` trials) and for the former scheme (the whole parquet
table rewritten, fsync-ed and renamed after every trial, emulated with a compaction
after every row). Rows are shaped like a real log's: 4 coefficients, 2 operating points,
predictions JSON of 121 velocities per point.

    python benchmarks/trial_log_cost.py [--rows 1000]
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

import profshape.trials as trials
from profshape.trials import TrialLog

NAMES = ("log10_inner_level", "log10_outer_level", "transition_z_m", "transition_width_m")
LABELS = ("300V", "250V")


def _row(i: int, rng: np.random.Generator) -> dict:
    z = np.linspace(0.0, 0.06, 121)
    preds = {lab: {"status": "ok", "z_m": z.tolist(),
                   "ion_velocity_m_s": (1e4 * rng.random(121)).tolist(),
                   "scalars": {"discharge_current": 5.0}, "reason": ""} for lab in LABELS}
    now = datetime.now(UTC)
    row = {"trial": i, "batch": i // 2, "source": "proposal", "status": "ok",
           "reduced_chi2": float(rng.random() * 10), "chi2": 1.0, "n_data": 24,
           "log_likelihood": -1.0, "wall_time_s": 0.2, "started_at": now, "finished_at": now,
           "error": "", "seed": 0, "version": "bench", "predictions": json.dumps(preds)}
    for lab in LABELS:
        row[f"misfit__{lab}"] = 1.0
        row[f"misfit__{lab}__ion_velocity"] = 1.0
    for n in NAMES:
        row[n] = float(rng.random())
        row[f"u__{n}"] = float(rng.random())
    return row


def _run(n_rows: int, every: int) -> tuple[float, float, float]:
    rng = np.random.default_rng(0)
    rows = [_row(i, rng) for i in range(n_rows)]
    saved = trials.COMPACT_EVERY
    trials.COMPACT_EVERY = every
    try:
        with tempfile.TemporaryDirectory() as tmp:
            log = TrialLog(Path(tmp) / "trials.parquet", NAMES, LABELS)
            times = []
            for row in rows:
                t0 = time.perf_counter()
                log.append(row)
                times.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            log.close()
            close = time.perf_counter() - t0
    finally:
        trials.COMPACT_EVERY = saved
    return float(np.mean(times)), float(np.max(times)), close


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1000)
    args = parser.parse_args()
    print(f"{'scheme':<34} {'mean per trial':>15} {'worst trial':>12} {'at close':>9}")
    for label, every in ((f"journal (compact every {trials.COMPACT_EVERY})", trials.COMPACT_EVERY),
                         ("rewrite the table every trial", 1)):
        mean, worst, close = _run(args.rows, every)
        print(f"{label:<34} {mean * 1e3:>12.2f} ms {worst * 1e3:>9.1f} ms {close * 1e3:>6.1f} ms")
    print(f"({args.rows} rows; the journal's mean includes its compactions)")


if __name__ == "__main__":
    main()
