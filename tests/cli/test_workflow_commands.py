"""The practitioner's commands: init, export, a [reference] profile, resume --budget,
compare; and the README's demo folder name and Python example (issue 12 bugs 2-4)."""

from __future__ import annotations

import json
import re
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import constants

from profshape.cli import main
from profshape.config import SCHEMA, parse_config

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE_CODE = ROOT / "tests" / "forward" / "example_code.py"
README = (ROOT / "README.md").read_text(encoding="utf-8")


def _run(*args: str, cwd: Path, timeout: float = 900) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "profshape.cli", *args], capture_output=True,
                          text=True, timeout=timeout, cwd=cwd)


def _truth(z: np.ndarray, volts: float) -> np.ndarray:
    sys.path.insert(0, str(EXAMPLE_CODE.parent))
    try:
        import example_code
    finally:
        sys.path.pop(0)
    prof = 10 ** (-2.3 + 1.2 * 0.5 * (1 + np.tanh((z - 0.026) / 0.003)))
    return np.array(example_code.ion_velocity(list(z), list(prof), volts))


def _case_toml(family: str, budget: int, extra: str = "") -> str:
    return textwrap.dedent(f"""
        title = "workflow test, {family}"

        [[operating_points]]
        label = "a"
        discharge_voltage_V = 300.0
        anode_mass_flow_kg_s = 5e-6
        propellant = "xenon"
        ion_velocity_file = "lif_a.csv"

        [[operating_points]]
        label = "b"
        discharge_voltage_V = 260.0
        anode_mass_flow_kg_s = 5e-6
        magnetic_field_scale = 0.9
        ion_velocity_file = "lif_b.csv"

        [device]
        preset = "demo"

        [shape]
        family = "{family}"

        [forward_model]
        kind = "external"
        command = [{json.dumps(sys.executable)}, {json.dumps(str(EXAMPLE_CODE))}, "{{input}}"]
        timeout_s = 30

        [search]
        budget = {budget}
        seed = 1
        num_restarts = 2
        raw_samples = 64

        [posterior]
        n_walkers = 16
        n_steps = 300
        burn_in = 100
        n_gp_draws = 2
        n_refine_rounds = 0
        n_check_draws = 3
        n_band_draws = 3
    """) + extra


@pytest.fixture(scope="module")
def case(tmp_path_factory) -> dict:
    """A finished calibration with a [reference] profile, run by `profshape calibrate`."""
    folder = tmp_path_factory.mktemp("workflow")
    z = np.linspace(0.004, 0.055, 12)
    for label, volts in (("a", 300.0), ("b", 260.0)):
        v = _truth(z, volts)
        pd.DataFrame({"z_m": z, "ion_velocity_m_s": np.round(v),
                      "sigma_ion_velocity_m_s": 300.0}).to_csv(folder / f"lif_{label}.csv", index=False)
    # a hand-tuned profile: a coarse two-level step in the Bohm-like coefficient
    pd.DataFrame({"z_m": [0.0, 0.022, 0.030, 0.06], "value": [0.006, 0.006, 0.07, 0.07]}).to_csv(
        folder / "hand_tuned.csv", index=False)
    (folder / "cal.toml").write_text(_case_toml("smooth_step", 10, textwrap.dedent("""
        [reference]
        file = "hand_tuned.csv"
        label = "hand-tuned"

        [output]
        folder = "res"
    """)))
    proc = _run("calibrate", "cal.toml", "--quiet", cwd=folder)
    assert proc.returncode == 0, proc.stderr[-3000:]
    return {"folder": folder, "run": folder / "res", "stdout": proc.stdout}


# --------------------------------------------------------------- issue 12 bugs 2, 3, 4
def test_calibrate_prints_the_real_output_folder(case):
    # [output] folder = "res" (relative to the file); it used to print "output folder: ."
    line = next(x for x in case["stdout"].splitlines() if x.startswith("output folder:"))
    assert Path(line.split(":", 1)[1].strip()).resolve() == case["run"].resolve()


def test_readme_names_the_demo_folder_it_writes():
    from profshape.cli import calibration

    prefix = re.search(r'new_folder_name\("([\w-]+)"\)',
                       Path(calibration.__file__).read_text()).group(1)
    assert prefix == "profshape-demo"
    demo_sentence = README[README.index("## Set-up"):README.index("<!-- setup:demo -->")]
    assert f"`{prefix}-*`" in demo_sentence and "profshape-run-*" not in demo_sentence


def test_readme_python_example_is_guarded():
    block = README[README.index("### In Python"):]
    code = block[block.index("```python") + 9:block.index("```", block.index("```python") + 9)]
    assert 'if __name__ == "__main__":' in code
    guard = code.index('if __name__ == "__main__":')
    assert "run_search(" in code[guard:] and "run_search(" not in code[:guard]
    compile(code, "README example", "exec")


# --------------------------------------------------------------------- issue 15 item 1
@pytest.mark.parametrize("model", ["builtin", "external"])
def test_init_writes_a_template_with_every_key(tmp_path, model, capsys):
    target = tmp_path / "new.toml"
    argv = ["init", str(target)] + (["--external"] if model == "external" else [])
    assert main(argv) == 0
    text = target.read_text()
    cfg = parse_config(text, path=target)
    assert cfg.data["forward_model"]["kind"] == model
    for table, spec in SCHEMA.items():
        assert re.search(rf"(?m)^#?\s*\[{table}\]|^#?\s*\[\[{table}\]\]|^#?\s*{table} =", text), table
        if isinstance(spec, dict) and "*" not in spec:
            for key in spec:
                assert re.search(rf"(?m)^#?\s*{key}\s*=|^#?\s*\[\[?{table}\.{key}\]\]?", text), \
                    f"{table}.{key}"
    assert main(argv) == 2  # never overwrites
    assert "exists" in capsys.readouterr().err


def test_readme_documents_every_key():
    ref = README[README.index("## Calibration file reference"):README.index("## Wrapping an in-house code")]
    for table, spec in SCHEMA.items():
        assert table in ref, table
        if isinstance(spec, dict) and "*" not in spec:
            for key in spec:
                assert re.search(rf"\b{key}\b", ref), f"{table}.{key} undocumented in the README"
    for key in ("preset", "n_gp_draws", "n_refine_rounds", "n_refine_draws"):
        assert re.search(rf"\b{key}\b", ref), key


# --------------------------------------------------------------------- issue 15 item 2
def test_export_round_trips_exactly(case):
    import xarray as xr

    from profshape.workflow.export import closure_frame, read_closure_csv

    out = case["folder"] / "exported"
    proc = _run("export", str(case["run"]), "--out", str(out), cwd=case["folder"])
    assert proc.returncode == 0, proc.stderr[-3000:]
    frame, attrs = closure_frame(case["run"])
    csv = read_closure_csv(out / "closure.csv")
    pd.testing.assert_frame_equal(csv, frame, check_exact=True, check_dtype=False)
    ds = xr.open_dataset(out / "closure.nc", engine="scipy")
    doc = json.loads((out / "closure.json").read_text())
    stats = ["best", "median", "lower_0.68", "upper_0.68", "lower_0.95", "upper_0.95"]
    for k, label in enumerate(ds["point"].values):
        f = frame[frame["label"] == label]
        np.testing.assert_array_equal(ds["z_m"].values, f["z_m"].to_numpy())
        assert doc["points"][k]["label"] == label
        for q in ("bohm_coefficient", "collision_frequency_hz"):
            for s in stats:
                exact = f[f"{q}__{s}"].to_numpy()
                np.testing.assert_array_equal(ds[f"{q}__{s}"].values[k], exact)
                np.testing.assert_array_equal(np.array(doc["points"][k][q][s]), exact)
        # the frequency is the coefficient times e B / m_e (CODATA via scipy.constants)
        omega = constants.e * f["magnetic_field_T"].to_numpy() / constants.m_e
        np.testing.assert_allclose(f["collision_frequency_hz__median"], f["bohm_coefficient__median"] * omega,
                                   rtol=1e-12)
        assert float(ds["discharge_voltage_V"].values[k]) == {"a": 300.0, "b": 260.0}[label]
    # the field used is the demo device's, times the point's scale (0.9 at "b")
    ratio = (frame.loc[frame["label"] == "b", "magnetic_field_T"].to_numpy()
             / frame.loc[frame["label"] == "a", "magnetic_field_T"].to_numpy())
    np.testing.assert_allclose(ratio, 0.9, rtol=1e-12)
    assert ds["collision_frequency_hz__median"].attrs["units"] == "s-1"
    assert ds["z_m"].attrs["units"] == "m" and ds.attrs["shape_family"] == "smooth_step"
    assert ds.attrs["best_trial"] == attrs["best_trial"]
    assert list(ds["propellant"].values) == ["xenon", "xenon"]
    ds.close()


# --------------------------------------------------------------------- issue 15 item 3
def test_reference_profile_is_run_and_tabulated(case):
    run = case["run"]
    ref = json.loads((run / "reference.json").read_text())
    assert ref["status"] == "ok" and ref["label"] == "hand-tuned"
    # chi-square recomputed by hand: sum of ((measured - model) / sigma)^2 with the model
    # interpolated linearly to the measured positions (no discrepancy, no position errors)
    chi2 = 0.0
    for label in ("a", "b"):
        data = pd.read_csv(case["folder"] / f"lif_{label}.csv")
        pred = ref["predictions"][label]
        model = np.interp(data["z_m"], pred["z_m"], pred["ion_velocity_m_s"])
        chi2 += float(np.sum(((data["ion_velocity_m_s"] - model) / data["sigma_ion_velocity_m_s"]) ** 2))
    assert ref["chi2"] == pytest.approx(chi2, rel=1e-9)
    assert ref["reduced_chi2"] == pytest.approx(chi2 / 24, rel=1e-9)
    summary = json.loads((run / "summary.json").read_text())
    assert summary["reference"]["reduced_chi2"] == pytest.approx(ref["reduced_chi2"])
    trials = pd.read_parquet(run / "trials.parquet")
    best = trials.loc[trials["reduced_chi2"].idxmin()]
    assert summary["reference"]["best_chi2"] == pytest.approx(best["chi2"])
    report = (run / "report.md").read_text()
    assert "## Best fit against the reference profile" in report
    assert "hand-tuned" in report and f"{ref['reduced_chi2']:.4g}" in report


# --------------------------------------------------------------------- issue 15 item 7
def test_resume_budget_extends_a_finished_run(case):
    run = case["run"]
    before = pd.read_parquet(run / "trials.parquet")
    post_before = (run / "posterior" / "posterior.json").read_text()
    bad = _run("resume", str(run), "--budget", str(len(before)), "--quiet", cwd=case["folder"])
    assert bad.returncode == 2 and f"already has {len(before)} trials" in bad.stderr
    proc = _run("resume", str(run), "--budget", str(len(before) + 3), "--quiet", cwd=case["folder"])
    assert proc.returncode == 0, proc.stderr[-3000:]
    after = pd.read_parquet(run / "trials.parquet")
    assert sorted(after["trial"]) == list(range(len(before) + 3))
    kept = after.set_index("trial").loc[before["trial"], "reduced_chi2"].to_numpy()
    np.testing.assert_array_equal(kept, before["reduced_chi2"].to_numpy())
    summary = json.loads((run / "summary.json").read_text())
    assert summary["n_trials"] == len(before) + 3
    # the posterior was redone on the longer log
    assert (run / "posterior" / "posterior.json").read_text() != post_before


# --------------------------------------------------------------------- issue 15 item 6
@pytest.mark.slow
def test_compare_two_families(case):
    folder = case["folder"]
    (folder / "cal2.toml").write_text(_case_toml("log_well", 9))
    proc = _run("calibrate", "cal2.toml", "--out", "run_well", "--quiet", cwd=folder)
    assert proc.returncode == 0, proc.stderr[-3000:]
    proc = _run("compare", str(case["run"]), str(folder / "run_well"), "--out", "cmp", cwd=folder)
    assert proc.returncode == 0, proc.stderr[-3000:]
    assert "delta BIC" in proc.stdout and "log_well" in proc.stdout
    table = pd.read_csv(folder / "cmp" / "comparison.csv")
    assert len(table) == 2 and set(table["family"]) == {"smooth_step", "log_well"}
    for r in table.to_dict("records"):
        run = Path(r["run"])
        trials = pd.read_parquet(run / "trials.parquet")
        ok = trials[trials["status"] == "ok"]
        # BIC = k ln n - 2 ln L (Schwarz 1978), n = 24 data values, L the best likelihood
        best_ll = max(ok["log_likelihood"].max(), r["best_log_likelihood"])
        assert r["bic"] == pytest.approx(4 * np.log(24) - 2 * best_ll, rel=1e-9)
        assert r["best_reduced_chi2"] == pytest.approx(ok["reduced_chi2"].min(), rel=1e-12)
        assert np.isfinite(r["log_evidence_laplace"])
        assert "[" in r["intervals_68"]
    assert table["delta_bic"].min() == 0.0
    assert (folder / "cmp" / "comparison.png").stat().st_size > 5000


def test_export_without_posterior_gives_the_best_profile(case, tmp_path):
    import shutil

    from profshape.workflow.export import export_closure, read_closure_csv

    run = tmp_path / "run"
    shutil.copytree(case["run"], run)
    shutil.rmtree(run / "bands")
    files = export_closure(run, formats=["csv"])
    frame = read_closure_csv(files["csv"])
    value_cols = [c for c in frame.columns if "__" in c]
    assert value_cols == ["bohm_coefficient__best", "collision_frequency_hz__best"]
    with pytest.raises(Exception, match="formats must be among"):
        export_closure(run, formats=["xlsx"])


def test_report_leaves_the_matplotlib_backend_alone(case, tmp_path):
    # writing a report used to call matplotlib.use("Agg"), switching e.g. a Jupyter session's
    # backend; it now draws on Figure objects. A fresh process, so no other test's backend counts.
    import shutil

    run = tmp_path / "run"
    shutil.copytree(case["run"], run)
    shutil.rmtree(run / "figures")
    code = textwrap.dedent(f"""
        import matplotlib
        matplotlib.use("svg")
        from profshape.workflow import rebuild_report
        summary = rebuild_report({str(run)!r})
        print(matplotlib.get_backend(), len(summary["figures"]))
    """)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=600, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr[-3000:]
    backend, n_figures = proc.stdout.split()
    assert backend == "svg"
    assert int(n_figures) > 0 and (run / "figures" / "fit.png").exists()
