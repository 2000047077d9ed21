"""The "pressure" scenario: held-out errors, coverage, and what the potential data add.

Runs the bundled scenario (Orvanta-60, 3 background pressures x 2 voltages, a
closure with d = 12) twice: with all its data, and with the plasma-potential
table left out. Prints

* the leave-one-point-out median absolute percentage error of thrust and
  discharge current and the 90 % band coverage (``profshape validate``);
* the width of the 90 % band of the Bohm-like coefficient profile (in decades,
  mean over z where potential data exist) with and without the potential data,
  and the fraction of those positions where the hidden truth lies inside;
* the best reduced chi-square of the closure calibration and whether it
  reaches <= 1.5 within its budget.

Usage (from the repository root; several minutes on 2 cores)::

    python benchmarks/pressure_validation.py [--out DIR] [--budget N]

Give ``--out`` a folder from an earlier run to reuse finished runs in it.
"""

from __future__ import annotations

import argparse
import json
import shutil
import time
from pathlib import Path

import numpy as np
import pandas as pd

from profshape.config import parse_config
from profshape.scenarios import scenario_config_text, scenario_folder
from profshape.shapes import SmoothStep
from profshape.validate import validate_run
from profshape.workflow import run_calibration


def _run(text: str, path: Path, out: Path) -> dict:
    if (out / "summary.json").exists():
        return json.loads((out / "summary.json").read_text())
    cfg = parse_config(text, path=path, base_dir=path.parent)
    return run_calibration(cfg, out, progress=False)


def _band_width(run: Path, truth: dict, z_lo: float, z_hi: float) -> tuple[float, float]:
    bands = pd.read_parquet(run / "bands" / "bands_profile.parquet")
    bands = bands[(bands["quantity"] == "bohm_coefficient") & (bands["label"].isin(truth))]
    family = SmoothStep(channel_length_m=0.030)
    widths, inside = [], []
    for label, b in bands.groupby("label"):
        b = b[(b["z_m"] >= z_lo) & (b["z_m"] <= z_hi)]
        lo, hi = b["lower_0.9"].to_numpy(), b["upper_0.9"].to_numpy()
        widths.append(np.mean(np.log10(hi) - np.log10(lo)))
        t = family.profile(family.coefficients_from_dict(truth[label]))(b["z_m"].to_numpy())
        inside.append(np.mean((t >= lo) & (t <= hi)))
    return float(np.mean(widths)), float(np.mean(inside))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default="pressure-benchmark", help="working folder")
    ap.add_argument("--budget", type=int, default=None, help="trials per calibration")
    args = ap.parse_args()
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    folder = scenario_folder("pressure")
    truth = json.loads((folder / "truth.json").read_text())
    text, path = scenario_config_text("pressure", budget=args.budget)

    t0 = time.perf_counter()
    full = _run(text, path, out / "all_data")
    t_full = time.perf_counter() - t0
    validation = validate_run(out / "all_data")

    # the same calibration without the potential table
    no_phi = out / "data_without_potential"
    no_phi.mkdir(exist_ok=True)
    for name in ("operating_points.csv", "ion_velocity.csv", "scalars.csv"):
        shutil.copy(folder / name, no_phi / name)
    (no_phi / "profiles.csv").unlink(missing_ok=True)
    shutil.copy(path, no_phi / path.name)
    _run(text, no_phi / path.name, out / "without_potential")

    z_phi = pd.read_csv(folder / "profiles.csv")["z_m"]
    w_all, in_all = _band_width(out / "all_data", truth, z_phi.min(), z_phi.max())
    w_vel, in_vel = _band_width(out / "without_potential", truth, z_phi.min(), z_phi.max())
    best = full.get("best_reduced_chi2")
    n_par = len(full.get("parameters") or full.get("best_coefficients") or {}) or "?"

    def pct(v):
        return "n/a" if v is None else f"{v:.2f} %"

    print(f"pressure scenario, budget {args.budget or 'as in pressure.toml'}; calibration "
          f"{t_full:.0f} s (0: reused from --out)")
    print(f"leave-one-point-out median abs. error: thrust {pct(validation['mape_thrust_percent'])}"
          f", discharge current {pct(validation['mape_discharge_current_percent'])}")
    print(f"90 % band coverage of held-out values: {validation['coverage_90']:.2f} "
          f"(by observable: {validation.get('coverage_90_by_observable')})")
    print("effective sample sizes: " + ", ".join(
        f"{k} {v['effective_sample_size']:.1f}" for k, v in validation["points"].items()))
    print(f"90 % profile band width over z in [{z_phi.min():.3f}, {z_phi.max():.3f}] m "
          f"[decades]: all data {w_all:.3f}, without potential {w_vel:.3f} "
          f"(narrower by {100 * (1 - w_all / w_vel):.0f} %); truth inside: {in_all:.2f} vs {in_vel:.2f}")
    print(f"closure calibration ({n_par} parameters): best reduced chi-square {best}; "
          f"<= 1.5: {best is not None and best <= 1.5}")


if __name__ == "__main__":
    main()
