"""Figures a practitioner publishes: residual panels, both error bars, titles with the
operating point, a clear pairs plot, a gallery with the best and latest trials, the
reference overlay and the family comparison."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from scipy import constants

from profshape import OperatingPoint
from profshape.data import DataSet, IonVelocityProfile, OperatingPointData
from profshape.plots import (
    gallery_selection,
    plot_comparison,
    plot_fit,
    plot_pairs,
    plot_profile_band,
    plot_shape_gallery,
)
from profshape.shapes import get_family

Z = np.linspace(0.0, 0.06, 61)


def _model(z, volts):
    return 1e3 * volts / 15.0 * (0.5 * (1 + np.tanh((z - 0.025) / 0.005)))


@pytest.fixture
def dataset():
    points = []
    for label, volts, gas in (("300V", 300.0, "xenon"), ("250V", 250.0, "krypton")):
        z = Z[5:56:6]  # on the model grid: the interpolated model is exact there
        v = _model(z, volts) + 150.0
        points.append(OperatingPointData(OperatingPoint(label, volts, 4.5e-6, gas),
                                         IonVelocityProfile(z, v, np.full(9, 300.0),
                                                            sigma_z_m=np.full(9, 0.0008))))
    return DataSet(points)


def test_fit_has_residuals_both_error_bars_and_operating_point_titles(dataset):
    best = {p.label: pd.DataFrame({"z_m": Z, "ion_velocity_m_s": _model(Z, p.discharge_voltage_V)})
            for p in dataset.operating_points}
    reference = {"label": "hand-tuned", "predictions": {
        lab: {"z_m": Z.tolist(), "ion_velocity_m_s": (0.9 * c["ion_velocity_m_s"]).tolist()}
        for lab, c in best.items()}}
    fig = plot_fit(dataset, best=best, reference=reference)
    visible = [ax for ax in fig.axes if ax.get_visible()]
    titles = [ax.get_title() for ax in visible if ax.get_title()]
    assert titles == ["300V: 300 V, 4.5 mg/s, xenon", "250V: 250 V, 4.5 mg/s, krypton"]
    residual_axes = [ax for ax in visible if ax.get_ylabel().startswith("data − model")]
    assert len(residual_axes) == 2
    # the residuals are the data minus the best fit: 150 m/s everywhere here
    for ax in residual_axes:
        container = ax.containers[0]  # errorbar: (data line, caps, (x bars, y bars))
        np.testing.assert_allclose(container.lines[0].get_ydata(), 0.150, atol=1e-9)
        assert container.has_xerr and container.has_yerr
    main = visible[0]
    assert main.containers[0].has_xerr  # position uncertainty drawn on the fit too
    assert any(line.get_label() == "hand-tuned" for line in main.get_lines())


def test_pairs_legend_and_labels_do_not_overlap():
    rng = np.random.default_rng(0)
    names = ["log10_inner_level", "log10_outer_level", "transition_z_m", "transition_width_m"]
    trials = pd.DataFrame({n: rng.uniform(0, 1, 30) for n in names})
    trials["status"] = ["ok"] * 28 + ["failed"] * 2
    trials["reduced_chi2"] = np.where(trials["status"] == "ok", rng.uniform(1, 50, 30), np.nan)
    posterior = pd.DataFrame({n: rng.normal(0.5, 0.1, 500) for n in names})
    fig = plot_pairs(trials, names, posterior, units=["log10(-)", "log10(-)", "m", "m"])
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    panels = [ax.get_window_extent(renderer) for ax in fig.axes
              if ax.get_visible() and ax.get_label() != "<colorbar>" and ax.get_position().width > 0.1]
    legend = fig.legends[0].get_window_extent(renderer)
    assert not any(legend.overlaps(p) for p in panels)
    xlabels = [ax.xaxis.label.get_window_extent(renderer) for ax in fig.axes
               if ax.get_visible() and ax.get_xlabel()]
    assert len(xlabels) == 4
    for a, b in itertools.pairwise(xlabels):
        assert not a.overlaps(b)
    ylabels = [ax.yaxis.label.get_window_extent(renderer) for ax in fig.axes
               if ax.get_visible() and ax.get_ylabel() and "chi-square" not in ax.get_ylabel()]
    for a, b in itertools.pairwise(ylabels):
        assert not a.overlaps(b)


def test_gallery_selection_keeps_the_best_and_the_latest():
    chosen = gallery_selection(40, 24, best=24)
    assert len(chosen) == 24 and chosen == sorted(set(chosen))
    assert 24 in chosen and 39 in chosen and 0 in chosen
    assert chosen[-6:] == list(range(34, 40))  # the latest quarter
    assert gallery_selection(10, 24, best=3) == list(range(10))


def test_gallery_shows_best_trial_past_the_first_panels():
    family = get_family("smooth_step", channel_length_m=0.024)
    rng = np.random.default_rng(1)
    b = np.asarray(family.bounds)
    c = b[:, 0] + rng.uniform(0, 1, (30, 4)) * (b[:, 1] - b[:, 0])
    trials = pd.DataFrame(c, columns=list(family.names))
    trials["trial"] = np.arange(30)
    trials["status"] = "ok"
    trials["reduced_chi2"] = np.linspace(20, 10, 30)
    trials.loc[24, "reduced_chi2"] = 1.2  # the best, beyond the first panels
    fig = plot_shape_gallery(trials, Z, family=family, max_shapes=12)
    titles = [ax.get_title() for ax in fig.axes if ax.get_visible() and ax.get_title()]
    assert len(titles) == 12
    assert any(t.startswith("#24 ") and t.endswith("best") for t in titles)
    assert titles[-1].startswith("#29 ")


def test_profile_band_overlays_reference_converted_to_frequency():
    frame = pd.DataFrame({"label": "a", "quantity": "frequency_hz", "z_m": Z,
                          "median": 1e7, "lower_0.68": 5e6, "upper_0.68": 2e7, "map": 1e7})
    reference = {"label": "hand-tuned", "quantity": "bohm",
                 "profile": {"z_m": [0.0, 0.06], "value": [0.01, 0.01]}}
    field = lambda z: np.full_like(np.asarray(z, dtype=float), 0.012)  # noqa: E731 - 12 mT
    fig = plot_profile_band(frame, reference=reference, magnetic_field_T=field,
                            points={"a": OperatingPoint("a", 300.0, 4.5e-6, magnetic_field_scale=0.5)})
    line = next(x for x in fig.axes[0].get_lines() if x.get_label() == "hand-tuned")
    # nu = coefficient x e B / m_e (CODATA via scipy.constants), B = 0.5 x 12 mT
    expected = 0.01 * constants.e * 0.006 / constants.m_e
    np.testing.assert_allclose(line.get_ydata(), expected, rtol=1e-12)


def test_comparison_figure(tmp_path):
    table = pd.DataFrame({"label": ["run_a", "run_b"], "family": ["smooth_step", "log_well"],
                          "delta_bic": [0.0, 7.5], "best_reduced_chi2": [1.1, 1.9],
                          "verdict": ["best", "strong evidence against"]})
    band = pd.DataFrame({"label": "a", "quantity": "bohm_coefficient", "z_m": Z, "median": 0.01,
                         "lower_0.68": 0.005, "upper_0.68": 0.02})
    fig = plot_comparison(table, {"run_a": band, "run_b": band.assign(median=0.02)},
                          paths=[tmp_path / "c.png"])
    assert (tmp_path / "c.png").stat().st_size > 5000
    texts = [t.get_text() for t in fig.axes[1].texts]
    assert any("strong evidence against" in t for t in texts)
    where = {t.get_text(): y for t, y in zip(fig.axes[1].get_yticklabels(), fig.axes[1].get_yticks())}
    assert where["run_a"] > where["run_b"]  # the best family on top
