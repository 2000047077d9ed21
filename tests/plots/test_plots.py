"""Plot functions: PNG and SVG written, axis labels carry units, rebuild from saved results."""

from __future__ import annotations

import re
import warnings

import numpy as np
import pandas as pd
import pytest
from posterior._linear import GRID_M, make_problem, make_trials

from profshape.exceptions import ConvergenceWarning, InputDataError
from profshape.plots import (
    best_fit_from_trials,
    plot_fit,
    plot_pairs,
    plot_profile_band,
    plot_search_trace,
    plot_shape_gallery,
)
from profshape.posterior import (
    PosteriorBands,
    PosteriorResult,
    PosteriorSettings,
    posterior_bands,
    sample_posterior,
)

UNIT = re.compile(r"\[[^\]]+\]")


@pytest.fixture(scope="module")
def calibration(tmp_path_factory):
    """A finished calibration folder: trial log, posterior and bands, saved and reloaded."""
    problem, _ = make_problem(np.array([-1.0, 0.4]), seed=4,
                              points=(("300V", 300.0), ("250V", 250.0)))
    trials = make_trials(problem, n_design=12, n_local=30, seed=2)
    trials["source"] = np.where(trials["trial"] < 12, "initial", "proposal")
    failed = trials["trial"].isin([3, 17])
    trials.loc[failed, "status"] = ["failed", "timeout"]
    trials.loc[failed, ["reduced_chi2", "log_likelihood"]] = np.nan
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        post = sample_posterior(problem, trials, PosteriorSettings(
            method="exact", n_walkers=8, n_steps=300, burn_in=100, n_check_draws=2))
    bands = posterior_bands(problem, post, n_draws=12)
    folder = tmp_path_factory.mktemp("calibration")
    trials.to_parquet(folder / "trials.parquet", index=False)
    post.save(folder / "posterior")
    bands.save(folder / "bands")
    return {
        "problem": problem,
        "trials": pd.read_parquet(folder / "trials.parquet"),
        "posterior": PosteriorResult.load(folder / "posterior"),
        "bands": PosteriorBands.load(folder / "bands"),
    }


def _labels(fig):
    out = []
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        out += [t for t in (ax.get_xlabel(), ax.get_ylabel()) if t]
    for attr in ("_supxlabel", "_supylabel"):
        t = getattr(fig, attr, None)
        if t is not None and t.get_text():
            out.append(t.get_text())
    return out


def _check_written(fig, tmp_path, stem):
    png, svg = tmp_path / f"{stem}.png", tmp_path / f"{stem}.svg"
    assert png.stat().st_size > 1000 and svg.stat().st_size > 1000
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
    assert "<svg" in svg.read_text()[:2000]
    labels = _labels(fig)
    assert labels, "figure has no axis labels"
    for text in labels:
        assert UNIT.search(text), f"axis label without unit: {text!r}"


def test_plot_fit(calibration, tmp_path):
    c = calibration
    fig = plot_fit(c["problem"].dataset, c["bands"],
                   paths=[tmp_path / "fit.png", tmp_path / "fit.svg"])
    _check_written(fig, tmp_path, "fit")
    assert sum(ax.get_visible() for ax in fig.axes) == 4  # a fit and its residuals per point
    best = best_fit_from_trials(c["trials"])
    assert set(best) == {"300V", "250V"}
    np.testing.assert_allclose(best["300V"]["z_m"], GRID_M)
    fig = plot_fit(c["problem"].dataset, c["bands"], best=best,
                   paths=[tmp_path / "fit2.png", tmp_path / "fit2.svg"])
    _check_written(fig, tmp_path, "fit2")


def test_plot_profile_band(calibration, tmp_path):
    fig = plot_profile_band(calibration["bands"], channel_length_m=0.025,
                            paths=[tmp_path / "profile.png", tmp_path / "profile.svg"])
    _check_written(fig, tmp_path, "profile")
    assert fig.axes[0].get_ylabel() == "anomalous collision frequency [1/s]"


def test_plot_search_trace(calibration, tmp_path):
    fig = plot_search_trace(calibration["trials"],
                            paths=[tmp_path / "trace.png", tmp_path / "trace.svg"])
    _check_written(fig, tmp_path, "trace")
    legend = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert "failed (1)" in legend and "timeout (1)" in legend


def test_plot_pairs(calibration, tmp_path):
    c = calibration
    fig = plot_pairs(c["trials"], c["problem"].names, c["posterior"],
                     units=c["problem"].units,
                     paths=[tmp_path / "pairs.png", tmp_path / "pairs.svg"])
    _check_written(fig, tmp_path, "pairs")


def test_plot_shape_gallery(calibration, tmp_path):
    c = calibration
    fig = plot_shape_gallery(c["trials"], GRID_M, family=c["problem"].family, max_shapes=18,
                             paths=[tmp_path / "gallery.png", tmp_path / "gallery.svg"])
    _check_written(fig, tmp_path, "gallery")
    titles = [ax.get_title() for ax in fig.axes if ax.get_visible() and ax.get_title()]
    assert titles[0].startswith("#0") and "failed" in titles[3]


def test_plot_errors(calibration, tmp_path):
    with pytest.raises(InputDataError, match="lacks columns"):
        plot_search_trace(calibration["trials"].drop(columns=["reduced_chi2"]))
    with pytest.raises(InputDataError, match="no suffix"):
        plot_search_trace(calibration["trials"], paths=tmp_path / "trace")
    with pytest.raises(InputDataError, match="give family or profiles"):
        plot_shape_gallery(calibration["trials"], GRID_M)
