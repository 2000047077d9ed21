"""profshape.exceptions: every public error and warning class lives there."""

from __future__ import annotations

import ast
import re
from pathlib import Path

import numpy as np
import pytest

import profshape
from profshape import exceptions
from profshape.exceptions import ConfigError, InputDataError, ModelOutputError
from profshape.profile import AnomalousProfile
from profshape.search.engine import Search
from profshape.search.surrogate import fit_objective_model

PACKAGE = Path(profshape.__file__).parent


def _classes_outside():
    found = []
    for path in PACKAGE.rglob("*.py"):
        if path.name == "exceptions.py" and path.parent == PACKAGE:
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ClassDef) and not node.name.startswith("_"):
                bases = [ast.unparse(b) for b in node.bases]
                if any(re.search(r"(Error|Warning|Exception)$", b) for b in bases):
                    found.append(f"{path.relative_to(PACKAGE)}:{node.name}")
    return found


def test_no_public_error_or_warning_class_outside_exceptions_module():
    assert _classes_outside() == []


def test_every_listed_class_is_an_error_or_warning():
    for name in exceptions.__all__:
        cls = getattr(exceptions, name)
        assert issubclass(cls, (exceptions.ProfshapeError, exceptions.ProfshapeWarning)), name
    assert issubclass(InputDataError, ValueError) and issubclass(ConfigError, InputDataError)
    assert issubclass(ModelOutputError, ValueError)
    assert issubclass(exceptions.PosteriorCheckWarning, exceptions.ConvergenceWarning)


def test_profile_kind_names_the_field():
    with pytest.raises(InputDataError, match=r"AnomalousProfile\.kind.*'bohm'.*'sideways'"):
        AnomalousProfile("sideways", lambda z: z)


def test_non_finite_gp_targets_are_an_input_error():
    with pytest.raises(InputDataError, match=r"train_y must be finite"):
        fit_objective_model(np.random.default_rng(0).random((4, 2)),
                            np.array([0.0, np.nan, 1.0, 2.0]))


def test_wrong_settings_object_is_the_same_error_in_engine_and_loop():
    from profshape.search.loop import run_search

    with pytest.raises(ConfigError, match=r"settings must be a SearchSettings; got dict"):
        Search(object(), {"budget": 3})
    with pytest.raises(ConfigError, match=r"settings must be a SearchSettings; got dict"):
        run_search(object(), {"budget": 3}, "unused.parquet")
