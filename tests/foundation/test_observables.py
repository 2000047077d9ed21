"""Profile observables besides ion velocity: tables, likelihood, output layout, producers."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import torch
from scipy import stats

from profshape import OperatingPoint
from profshape.data import (
    DataSet,
    IonVelocityProfile,
    OperatingPointData,
    ProfileMeasurement,
    ScalarObservable,
    load_dataset,
)
from profshape.exceptions import InputDataError
from profshape.forward import Prediction
from profshape.forward.builtin import BuiltinSolverModel
from profshape.likelihood import LikelihoodSettings, evaluate_misfit, residual_table
from profshape.observables import check_producible
from profshape.output_layout import OutputLayout

ZG = np.linspace(0.0, 0.06, 121)
ZV = np.array([0.004, 0.012, 0.021, 0.027, 0.033, 0.045])
ZP = np.array([0.005, 0.015, 0.025, 0.035])


def _u(z):
    return 1000.0 + 16000.0 / (1.0 + np.exp(-(z - 0.025) / 0.004))


def _phi(z):
    return 300.0 - 280.0 / (1.0 + np.exp(-(z - 0.024) / 0.003))


def _point_data(label="p", sigma_z=None):
    vel = IonVelocityProfile(ZV, _u(ZV) + 150.0, np.full(6, 300.0))
    pot = ProfileMeasurement("plasma_potential", ZP, _phi(ZP) - 4.0, np.full(4, 5.0), sigma_z)
    return OperatingPointData(OperatingPoint(label, 300.0, 5e-6), vel,
                              {"discharge_current": ScalarObservable("discharge_current", 4.3, 0.1)},
                              {"plasma_potential": pot})


def _pred(shift=0.0):
    return Prediction("ok", ZG, _u(ZG), {"discharge_current": 4.2},
                      profiles={"plasma_potential": _phi(ZG) + shift})


def test_potential_in_the_likelihood_matches_scipy_with_its_own_discrepancy_and_weight():
    ds = DataSet([_point_data()])
    s = LikelihoodSettings(profile_discrepancy={"plasma_potential": 3.0},
                           weights={"plasma_potential": 2.0})
    m = evaluate_misfit(ds, {"p": _pred()}, s)
    # reference: scipy.stats.norm.logpdf, potential sigma = hypot(5, 3) and weight 2
    ref = stats.norm.logpdf(_u(ZV) + 150.0, _u(ZV), 300.0).sum()
    ref += 2.0 * stats.norm.logpdf(_phi(ZP) - 4.0, _phi(ZP), np.hypot(5.0, 3.0)).sum()
    ref += stats.norm.logpdf(4.3, 4.2, 0.1)
    assert m.ok and m.n_data == 11
    assert m.log_likelihood == pytest.approx(ref, rel=1e-12)
    assert m.per_observable["p/plasma_potential"] == pytest.approx(2 * 4 * 16.0 / 34.0)
    table = residual_table(ds, {"p": _pred()}, s)
    assert set(table["observable"]) == {"ion_velocity", "plasma_potential", "discharge_current"}
    assert table["chi2"].sum() == pytest.approx(m.chi2, rel=1e-12)


def test_prediction_without_the_profile_fails_the_misfit():
    ds = DataSet([_point_data()])
    m = evaluate_misfit(ds, {"p": Prediction("ok", ZG, _u(ZG), {"discharge_current": 4.2})})
    assert not m.ok and "plasma-potential" in m.reason
    bad = Prediction("ok", ZG, _u(ZG), profiles={"plasma_potential": _phi(ZG)[:-1]})
    assert not bad.ok and "plasma_potential" in bad.reason


def test_layout_with_profiles_equals_evaluate_misfit_and_rebuilds_from_the_trial_log():
    ds = DataSet([_point_data("a", sigma_z=np.full(4, 5e-4)), _point_data("b")])
    s = LikelihoodSettings(discrepancy_sigma_m_s=100.0,
                           profile_discrepancy={"plasma_potential": 2.0},
                           scalar_discrepancy={"discharge_current": 0.03})
    preds = {"a": _pred(1.0), "b": _pred(-2.0)}
    layout = OutputLayout(ds, s)
    y = layout.vector(preds)
    assert layout.n_values == ds.n_data == 22 and y.shape == (22 + 4,)  # 4 potential slopes
    ref = evaluate_misfit(ds, preds, s)  # the reference implementation of the same rules
    assert float(layout.chi2(y)) == pytest.approx(ref.chi2, rel=1e-12)
    assert float(layout.log_likelihood(torch.as_tensor(y))) == pytest.approx(ref.log_likelihood,
                                                                             rel=1e-12)
    text = json.dumps({lab: p.to_json_dict() for lab, p in preds.items()})
    np.testing.assert_allclose(layout.vector_from_json(text), y)


def test_profiles_table_round_trip_and_ion_velocity_in_long_form(tmp_path):
    ds = DataSet([_point_data()])
    ds.save(tmp_path / "d")
    back = load_dataset(tmp_path / "d")
    np.testing.assert_allclose(back["p"].profiles["plasma_potential"].value, _phi(ZP) - 4.0)
    # ion velocity given in the long table instead of its own one
    folder = tmp_path / "long"
    folder.mkdir()
    ds.tables()["operating_points"].to_csv(folder / "operating_points.csv", index=False)
    rows = [{"label": "p", "observable": "ion_velocity", "z_m": z, "value": v, "sigma": 300.0}
            for z, v in zip(ZV, _u(ZV), strict=True)]
    pd.DataFrame(rows).to_csv(folder / "profiles.csv", index=False)
    np.testing.assert_allclose(load_dataset(folder)["p"].ion_velocity.velocity_m_s, _u(ZV))


def test_unknown_observable_refused_with_file_row_and_did_you_mean(tmp_path):
    folder = tmp_path / "d"
    DataSet([_point_data()]).save(folder)
    df = pd.read_csv(folder / "profiles.csv")
    df.loc[2, "observable"] = "plasma_potentail"
    df.to_csv(folder / "profiles.csv", index=False)
    with pytest.raises(InputDataError, match=r"profiles.csv, row 3, column 'observable': unknown "
                       r"profile observable 'plasma_potentail' \(did you mean 'plasma_potential'"):
        load_dataset(folder)


def test_negative_density_and_bad_sigma_refused_with_row():
    with pytest.raises(InputDataError, match=r"d.csv, row 2, column 'value': plasma_density must be "
                       r">= 0; got -1e\+17"):
        ProfileMeasurement("plasma_density", [0.01, 0.02], [1e17, -1e17], [1e16, 1e16],
                           source="d.csv")
    with pytest.raises(InputDataError, match=r"row 1, column 'sigma': uncertainty must be > 0"):
        ProfileMeasurement("plasma_potential", [0.01, 0.02], [100.0, 50.0], [0.0, 2.0])


class _VelocityOnly(BuiltinSolverModel):
    profile_names = ("ion_velocity",)


def test_observable_the_model_cannot_produce_refused_before_any_run():
    ds = DataSet([_point_data()])
    check_producible(ds, BuiltinSolverModel())  # produces the potential: passes
    with pytest.raises(InputDataError, match=r"operating point 'p' has 'plasma_potential' data, "
                       r"but the forward model 'builtin-solver' does not produce it.*Remove"):
        check_producible(ds, _VelocityOnly())


def test_builtin_solver_returns_profiles_and_oscillation_scalars():
    from profshape.shapes import get_family
    from profshape.solver import SolverSettings, demo_device, demo_operating_points

    family = get_family("smooth_step", channel_length_m=0.024)
    p = BuiltinSolverModel(demo_device(), SolverSettings(n_cells=80))(
        family.profile(np.array([-2.6, -1.0, 0.026, 0.004])), demo_operating_points()[0])
    assert p.ok, p.reason
    assert set(p.profiles) == {"plasma_potential", "electron_temperature", "plasma_density"}
    assert {"ion_beam_current", "discharge_current_rms_amplitude",
            "discharge_current_frequency"} <= set(p.scalars)
    assert p.scalars["ion_beam_current"] <= p.scalars["discharge_current"] * (1 + 1e-9) + 1e-12
    assert np.all(p.profiles["plasma_density"] > 0)


def test_external_program_carries_the_potential(tmp_path):
    from profshape.forward.external import ExternalModel
    from profshape.profile import AnomalousProfile

    example = str(Path(__file__).parents[1] / "forward" / "example_code.py")
    prof = AnomalousProfile("bohm", lambda z: 0.002 + 0.06 / (1 + np.exp(-(z - 0.024) / 0.002)),
                            {"a": 1.0}, "test")
    p = ExternalModel([sys.executable, example, "{input}"], base_dir=tmp_path)(
        prof, OperatingPoint("x", 300.0, 4.5e-6))
    assert p.ok, p.reason
    phi = p.profiles["plasma_potential"]
    # the example drops 90 % of the voltage: 300 V at the anode, 30 V at the end
    assert phi[0] == pytest.approx(300.0) and phi[-1] == pytest.approx(30.0, rel=1e-9)


def test_trace_summary_rows_are_known_scalars_the_solver_produces():
    from profshape.traces import summarize_trace

    t = np.arange(20000) / 1e6  # 20 ms at 1 MHz
    s = summarize_trace(t, 4.0 + 0.3 * np.sin(2 * np.pi * 15e3 * t))
    obs = [ScalarObservable(r["name"], r["value"], r["sigma"], r["unit"]) for r in s.as_scalars()]
    assert {o.name for o in obs} <= set(BuiltinSolverModel.scalar_names)
    # rms of a sinusoid of amplitude a is a / sqrt(2) (closed form)
    assert obs[1].value == pytest.approx(0.3 / np.sqrt(2), rel=1e-3)


def _calibration_file(tmp_path, discrepancy: str) -> Path:
    DataSet([_point_data()]).save(tmp_path / "d")
    path = tmp_path / "cal.toml"
    path.write_text(f'''
data_folder = "d"
[device]
preset = "demo"
[shape]
family = "smooth_step"
[likelihood]
discrepancy = {discrepancy}
''')
    return path


def test_calibration_file_sets_the_discrepancy_per_observable(tmp_path):
    from profshape.config import load_config
    from profshape.workflow import build_calibration

    cal = build_calibration(load_config(_calibration_file(
        tmp_path, "{ plasma_potential = 5.0, discharge_current = 0.03 }")), tmp_path / "out",
        progress=False)
    lk = cal.problem.likelihood
    assert lk.profile_discrepancy == {"plasma_potential": 5.0}
    assert lk.scalar_discrepancy == {"discharge_current": 0.03}


@pytest.mark.parametrize("table, match", [
    ("{ plasma_potentail = 5.0 }", r"likelihood.discrepancy.plasma_potentail: unknown observable "
                                   r"\(did you mean 'plasma_potential'\?\)"),
    ("{ ion_velocity = 50.0 }", r"discrepancy_sigma_m_s"),
    ("{ plasma_potential = -1.0 }", r"profile_discrepancy\['plasma_potential'\] must be a finite "
                                    r"number >= 0; got -1.0"),
])
def test_bad_discrepancy_key_or_value_refused_naming_the_key(tmp_path, table, match):
    from profshape.config import load_config
    from profshape.workflow import build_calibration

    with pytest.raises(InputDataError, match=match):
        build_calibration(load_config(_calibration_file(tmp_path, table)), tmp_path / "out",
                          progress=False)


def test_posterior_readers_keep_the_profiles():
    import json

    from profshape.posterior.emulated import predictions_from_json

    # the trial log's predictions JSON (profshape.trials.trial_row) for search and posterior
    back = predictions_from_json(json.dumps({"p": _pred(1.0).to_json_dict()}))["p"]
    np.testing.assert_allclose(back.profiles["plasma_potential"], _phi(ZG) + 1.0)
