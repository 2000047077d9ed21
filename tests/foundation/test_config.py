"""profshape.config: the calibration file checked from the constraint tables."""

from __future__ import annotations

import dataclasses

import pytest

from profshape.config import MAXIMA, SCHEMA, Key, load_config, parse_config
from profshape.exceptions import ConfigError, InputDataError
from profshape.posterior.settings import PosteriorSettings
from profshape.search.settings import SearchSettings

BASE = """\
[[operating_points]]
label = "300V"
discharge_voltage_V = 300.0
anode_mass_flow_kg_s = 4.5e-6
ion_velocity_file = "lif.csv"

[shape]
family = "smooth_step"
"""


def _refused(extra: str) -> str:
    with pytest.raises(ConfigError) as info:
        parse_config(BASE + extra, path="cal.toml")
    assert isinstance(info.value, ValueError) and isinstance(info.value, InputDataError)
    return str(info.value)


def test_defaults_come_from_the_settings_dataclasses():
    cfg = parse_config(BASE)
    search = {f.name: f.default for f in dataclasses.fields(SearchSettings)}
    post = {f.name: f.default for f in dataclasses.fields(PosteriorSettings)}
    for key, value in cfg.section("search").items():
        if key in search and key != "budget":
            assert value == search[key], key
    assert cfg.section("search")["budget"] == 40  # the file's own default (the class has none)
    for key, value in cfg.section("posterior").items():
        if key == "band_levels":
            assert tuple(value) == post[key]
        elif key in post and key != "seed":
            assert value == post[key], key
    assert cfg.section("posterior")["seed"] is None  # None: the search's seed
    assert cfg.section("forward_model")["timeout_s"] == 600.0


def test_every_file_key_is_declared_as_a_key_or_a_table():
    for table, spec in SCHEMA.items():
        if isinstance(spec, dict):
            for key, sub in spec.items():
                assert isinstance(sub, Key | dict | str) or sub is None, f"{table}.{key}"
        else:
            assert isinstance(spec, Key | str), table


@pytest.mark.parametrize(
    ("extra", "pieces"),
    [
        ("[search]\nbudget = 0\n", ["cal.toml", "'search.budget'", "line 10", "must be >= 1",
                                   "got 0", "Give budget=1 or more"]),
        ('[search]\nbudget = "four"\n', ["'search.budget'", "must be an integer >= 1",
                                         "got 'four'"]),
        ("[search]\nbudget = 4.5\n", ["'search.budget'", "must be an integer", "got 4.5"]),
        ('[search]\nstrategy = "globl"\n', ["'search.strategy'", "must be one of",
                                            "did you mean 'global'"]),
        ("[search]\ntarget_reduced_chi2 = 0.0\n", ["search.target_reduced_chi2", "must be > 0"]),
        ("[search]\nseed = -3\n", ["'search.seed'", "must be >= 0", "got -3"]),
        ("[search]\nstop_after_failures = -1\n", ["search.stop_after_failures", "must be >= 0",
                                                  "Use 0 to never stop"]),
        ("[forward_model]\ntimeout_s = -1\n", ["forward_model.timeout_s", "must be > 0",
                                               "seconds"]),
        ("[forward_model]\ntimeout_s = nan\n", ["forward_model.timeout_s", "must be finite"]),
        ('[forward_model]\nkind = "magic"\n', ["forward_model.kind", "'builtin', 'external'",
                                               "got 'magic'"]),
        ("[forward_model]\ngrid_points = 1\n", ["forward_model.grid_points", "must be >= 2"]),
        ("[workers]\nn_workers = 0\n", ["workers.n_workers", "must be >= 1"]),
        ("[posterior]\nn_walkers = 0\n", ["'posterior.n_walkers'", "must be >= 2",
                                          "Use an even number"]),
        ("[posterior]\nthin = 0\n", ["posterior.thin", "must be >= 1", "Use 1 to keep all"]),
        ("[posterior]\nrefine_threshold_nats = 0\n", ["posterior.refine_threshold_nats",
                                                       "must be > 0"]),
        ("[posterior]\nenabled = 1\n", ["posterior.enabled", "must be true or false", "got 1"]),
        ("[posterior]\nn_steps = 100\nburn_in = 200\n", ["posterior.burn_in",
                                                          "smaller than n_steps = 100"]),
        ("[posterior]\nband_levels = [1.5]\n", ["posterior.band_levels", "(0, 1)"]),
        ("[search]\nbugdet = 3\n", ["'search.bugdet'", "unknown key", "did you mean 'budget'"]),
        ("[serach]\nbudget = 3\n", ["'serach'", "unknown table", "did you mean 'search'"]),
        ('[output]\nfigures = ["exe"]\n', ["'output.figures[1]'", "arrays counted from 1"]),
    ],
)
def test_errors_name_the_key_the_value_and_the_fix(extra, pieces):
    message = _refused(extra)
    for piece in pieces:
        assert piece in message, (piece, message)


@pytest.mark.parametrize("dotted", sorted(MAXIMA))
def test_every_maximum_is_enforced(dotted):
    table, key = dotted.split(".")
    top = MAXIMA[dotted]
    extra = f"[{table}]\n{key} = {top + 1}\n"
    message = _refused(extra)
    assert f"'{dotted}'" in message and f"must be at most {top:,}" in message
    parse_config(BASE + extra.replace(str(top + 1), str(top)))  # the maximum itself is taken


def test_required_keys_and_point_lines():
    with pytest.raises(ConfigError, match=r"'shape\.family'.*is required but missing"):
        parse_config(BASE.replace('family = "smooth_step"\n', ""), path="cal.toml")
    bad = BASE.replace("discharge_voltage_V = 300.0", 'discharge_voltage_V = "300 V"')
    with pytest.raises(ConfigError, match=r"'operating_points\[1\]\.discharge_voltage_V' "
                                          r"\(line 3; arrays counted from 1\): must be a number"):
        parse_config(bad, path="cal.toml")


def test_integral_float_counts_are_taken_as_integers():
    cfg = parse_config(BASE + "[search]\nbudget = 12.0\n")
    assert cfg.section("search")["budget"] == 12 and type(cfg.section("search")["budget"]) is int


def test_load_config_missing_file(tmp_path):
    with pytest.raises(ConfigError, match="calibration file not found"):
        load_config(tmp_path / "none.toml")
