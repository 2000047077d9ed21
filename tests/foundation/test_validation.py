"""profshape.validation: each constraint kind's passing and failing side, and the messages."""

from __future__ import annotations

from numbers import Integral, Real

import numpy as np
import pytest

from profshape.exceptions import ConfigError, InputDataError
from profshape.posterior.settings import CONSTRAINTS as POSTERIOR
from profshape.posterior.settings import PosteriorSettings
from profshape.search.settings import CONSTRAINTS as SEARCH
from profshape.search.settings import SearchSettings
from profshape.solver.settings import CONSTRAINTS as SOLVER
from profshape.solver.settings import SolverSettings
from profshape.validation import (
    InstanceOf,
    Interval,
    Options,
    constraint_text,
    validate,
    validate_value,
)


@pytest.mark.parametrize(
    ("constraint", "good", "converted"),
    [
        (Interval(Integral, 1, None, closed="left"), 1, 1),
        (Interval(Integral, 1, None, closed="left"), np.int64(7), 7),
        (Interval(Integral, 1, None, closed="left"), 3.0, 3),
        (Interval(Real, 0, None, closed="neither"), 1e-300, 1e-300),
        (Interval(Real, 0, 1, closed="both"), 0, 0.0),
        (Interval(Real, 0, 1, closed="both"), 1, 1.0),
        (Interval(Real, 0, 1, closed="right"), 1.0, 1.0),
        (Options(str, ("log", "identity")), "log", "log"),
        (Options(str, ("a", "b"), normalise=lambda v: v.strip().lower()), " B ", "b"),
        (InstanceOf(bool), False, False),
    ],
)
def test_passing_side(constraint, good, converted):
    value = validate_value("x", good, [constraint])
    assert value == converted and type(value) is type(converted)


@pytest.mark.parametrize(
    ("constraint", "bad", "message"),
    [
        (Interval(Integral, 1, None, closed="left"), 0, r"^x must be >= 1; got 0\.$"),
        (Interval(Integral, 1, None, closed="left"), 2.5, r"^x must be an integer >= 1; got 2\.5\.$"),
        (Interval(Integral, 1, None, closed="left"), True, r"^x must be an integer >= 1; got True\.$"),
        (Interval(Integral, 1, None, closed="left"), "3", r"must be an integer >= 1; got '3'"),
        (Interval(Real, 0, None, closed="neither"), 0.0, r"^x must be > 0; got 0\.0\.$"),
        (Interval(Real, 0, None, closed="neither"), float("nan"), r"^x must be finite; got nan\.$"),
        (Interval(Real, None, None), float("inf"), r"^x must be finite; got inf\.$"),
        (Interval(Real, 0, 1, closed="both"), 1.5, r"^x must lie in \[0, 1\]; got 1\.5\.$"),
        (Interval(Real, 0, 1, closed="neither"), 1.0, r"^x must lie in \(0, 1\); got 1\.0\.$"),
        (Interval(Real, 0, 1, closed="left"), 1.0, r"^x must lie in \[0, 1\); got 1\.0\.$"),
        (Interval(Real, None, 5, closed="right"), 6, r"^x must be <= 5; got 6\.$"),
        (Interval(Real, None, 5, closed="neither"), 5, r"^x must be < 5; got 5\.$"),
        (Options(str, ("log", "identity")), "lgo",
         r"^x must be one of \['log', 'identity'\]; got 'lgo' \(did you mean 'log'\?\)\.$"),
        (Options(str, ("log", "identity")), 3, r"^x must be one of \['log', 'identity'\]; got 3\.$"),
        (InstanceOf(bool), 1, r"^x must be True or False; got 1\.$"),
        (InstanceOf(str), 1.0, r"^x must be a string; got 1\.0\.$"),
    ],
)
def test_failing_side_names_field_value(constraint, bad, message):
    with pytest.raises(InputDataError, match=message) as info:
        validate_value("x", bad, [constraint])
    assert isinstance(info.value, ValueError)


def test_none_is_a_constraint_of_its_own():
    table = [Interval(Integral, 1, None, closed="left"), None]
    assert validate_value("x", None, table) is None
    with pytest.raises(InputDataError, match=r"^x must be >= 1; got 0\. Use 1\.$"):
        validate_value("x", 0, table, fix="Use 1.")
    with pytest.raises(InputDataError, match=r"must be an integer >= 1 or None; got 'a'"):
        validate_value("x", "a", table)
    with pytest.raises(InputDataError, match="got None"):
        validate_value("x", None, [Interval(Integral, 1, None, closed="left")])
    assert constraint_text(table) == "an integer >= 1 or None"


def test_validate_names_owner_and_key_and_uses_the_error_class():
    table = {"n": [Interval(Integral, 1, None, closed="left")]}
    assert validate("Owner", {"n": 2.0, "other": "x"}, table) == {"n": 2, "other": "x"}
    with pytest.raises(ConfigError, match=r"^Owner\.n must be >= 1; got 0\. Fix it\.$"):
        validate("Owner", {"n": 0}, table, fixes={"n": "Fix it."}, error=ConfigError)


@pytest.mark.parametrize(("cls", "table"), [(SearchSettings, SEARCH),
                                             (PosteriorSettings, POSTERIOR),
                                             (SolverSettings, SOLVER)])
def test_every_table_names_real_fields_and_the_defaults_satisfy_it(cls, table):
    import dataclasses

    names = {f.name for f in dataclasses.fields(cls)}
    assert set(table) <= names
    defaults = cls(budget=10) if cls is SearchSettings else cls()
    for name, constraints in table.items():
        value = getattr(defaults, name)
        assert validate_value(name, value, constraints) == value, name


def test_settings_classes_raise_from_their_tables():
    with pytest.raises(ConfigError, match=r"SearchSettings\.mc_samples must be >= 1; got 0"):
        SearchSettings(budget=3, mc_samples=0)
    with pytest.raises(InputDataError, match=r"PosteriorSettings\.n_features must be >= 16; got 8"):
        PosteriorSettings(n_features=8)
    with pytest.raises(InputDataError, match=r"solver\.wall_material must be one of .*'alumina'"):
        SolverSettings(wall_material="paper")
    assert SolverSettings(n_cells=100.0).n_cells == 100
    assert type(SolverSettings(n_cells=100.0).n_cells) is int
    assert SearchSettings(budget=np.int64(5)).budget == 5
