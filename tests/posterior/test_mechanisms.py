"""The mechanisms that exist once: parameter space, atomic writes, fan-out, trial rows."""

from __future__ import annotations

import json
import pickle
from concurrent.futures import BrokenExecutor, Future
from pathlib import Path

import numpy as np
import pytest
import torch

from profshape.atomic_write import atomic_write_bytes, atomic_write_text, json_safe
from profshape.exceptions import ForwardModelError, InputDataError
from profshape.executors import InlineExecutor
from profshape.fan_out import WORKER_DIED, prediction_of, run_profiles
from profshape.forward.base import Prediction
from profshape.parameter_space import Parameter, check_in_bounds, from_unit, to_unit
from profshape.search import SearchSpace
from profshape.shapes import SmoothStep
from profshape.trials import trial_row

from ._linear import make_problem


# ----------------------------------------------------------------- parameter space
def test_unit_cube_map_is_the_same_for_family_problem_and_search_space():
    problem, _ = make_problem(np.array([-1.5, 0.4, -0.1]))
    family = SmoothStep()
    space = SearchSpace(problem.names, problem.bounds)
    rng = np.random.default_rng(3)
    u = rng.random((5, problem.dim))
    x = problem.from_unit(u)
    # the linear map by hand: lower + u * (upper - lower)
    expected = problem.bounds[:, 0] + u * (problem.bounds[:, 1] - problem.bounds[:, 0])
    np.testing.assert_allclose(x, expected, rtol=0, atol=1e-15)
    np.testing.assert_allclose(space.from_unit(u), expected, rtol=0, atol=1e-15)
    np.testing.assert_allclose(problem.to_unit(x), u, rtol=0, atol=1e-12)
    uf = rng.random((4, family.n_coefficients))
    np.testing.assert_allclose(family.to_unit(family.from_unit(uf)), uf, rtol=0, atol=1e-12)


def test_unit_cube_map_keeps_torch_tensors_differentiable():
    bounds = np.array([[0.0, 2.0], [-1.0, 3.0]])
    u = torch.tensor([[0.25, 0.5]], dtype=torch.float64, requires_grad=True)
    x = from_unit(u, bounds)
    assert isinstance(x, torch.Tensor)
    x.sum().backward()
    np.testing.assert_allclose(u.grad.numpy(), [[2.0, 4.0]])  # d x / d u = upper - lower
    np.testing.assert_allclose(to_unit(x.detach(), bounds).numpy(), [[0.25, 0.5]])


def test_bounds_check_names_the_parameter_value_and_bounds():
    params = [Parameter("a_m", 0.0, 1.0, "m"), Parameter("b", -1.0, 1.0, "-")]
    with pytest.raises(InputDataError, match=r"'b' = 2\.0 .* outside its bounds \[-1\.0, 1\.0\]"):
        check_in_bounds(np.array([0.5, 2.0]), params, "owner")
    # within the relative slack (1e-9 of the width) a value is clipped onto its bound
    np.testing.assert_array_equal(check_in_bounds(np.array([1.0 + 1e-12, 0.0]), params, "o"),
                                  [1.0, 0.0])


# -------------------------------------------------------------------- atomic writes
def test_atomic_write_replaces_whole_and_leaves_no_temporary(tmp_path: Path):
    path = tmp_path / "sub" / "file.json"
    atomic_write_text(path, "first")
    atomic_write_text(path, "second")
    assert path.read_text() == "second"
    assert sorted(p.name for p in path.parent.iterdir()) == ["file.json"]


def test_atomic_write_keeps_the_old_file_when_the_writer_fails(tmp_path: Path):
    path = tmp_path / "table.csv"
    atomic_write_text(path, "old")

    def half_written(tmp: str) -> None:
        Path(tmp).write_text("torn")
        raise OSError("disk full")

    with pytest.raises(OSError, match="disk full"):
        atomic_write_bytes(path, half_written)
    assert path.read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["table.csv"]


def test_json_safe_turns_non_finite_into_null():
    text = json.dumps(json_safe({"a": np.float64("nan"), "b": (np.int64(2), np.inf), 3: True}))
    assert json.loads(text) == {"a": None, "b": [2, None], "3": True}


# ------------------------------------------------------------------------- fan-out
def _future(result=None, exc: BaseException | None = None) -> Future:
    fut: Future = Future()
    if exc is None:
        fut.set_result(result)
    else:
        fut.set_exception(exc)
    return fut


def test_fan_out_turns_executor_failures_into_logged_predictions():
    died = prediction_of(_future(exc=BrokenExecutor("pool broke")))
    assert died.status == "failed" and died.reason.startswith(WORKER_DIED)
    other = prediction_of(_future(exc=RuntimeError("boom")))
    assert other.status == "failed" and "RuntimeError: boom" in other.reason
    wrong = prediction_of(_future(result=42))
    assert wrong.status == "failed" and "returned int" in wrong.reason
    with pytest.raises(ForwardModelError, match="could not be sent to the executor"):
        prediction_of(_future(exc=pickle.PicklingError("cannot pickle lambda")))


def test_fan_out_gives_the_same_predictions_inline_and_on_an_executor():
    problem, _ = make_problem(np.array([-1.5, 0.4, -0.1]), points=(("a", 300.0), ("b", 250.0)))
    rows = problem.from_unit(np.random.default_rng(1).random((3, problem.dim)))
    profiles = [problem.profiles(c) for c in rows]
    points = {p.label: p for p in problem.dataset.operating_points}
    here = run_profiles(problem.forward_model, profiles, points)
    there = run_profiles(problem.forward_model, profiles, points, InlineExecutor())
    for a, b in zip(here, there, strict=True):
        assert list(a) == ["a", "b"]
        for lab in a:
            np.testing.assert_array_equal(a[lab].ion_velocity_m_s, b[lab].ion_velocity_m_s)
    outcomes = problem.evaluate_many(rows, InlineExecutor())
    for c, o in zip(rows, outcomes, strict=True):
        assert o.ok and o.misfit.chi2 == pytest.approx(problem.evaluate(c).misfit.chi2, rel=1e-12)


# ---------------------------------------------------------------------- trial rows
def test_search_and_posterior_rows_keep_a_failed_point_alike():
    from profshape.posterior._evaluate import _from_outcome, runs_to_frame

    problem, _ = make_problem(np.array([-1.5, 0.4, -0.1]), points=(("a", 300.0), ("b", 250.0)))
    c = problem.from_unit(np.full(problem.dim, 0.5))
    ok = problem.forward_model(problem.profile_for(c, "a"), problem.dataset["a"].point)
    preds = {"a": ok, "b": Prediction.failure("not_converged", "residual 3e-2 after 500 steps")}
    outcome = problem.outcome(c, preds)
    assert outcome.status == "not_converged"
    row = trial_row(problem, c, problem.to_unit(c), status=outcome.status, reason=outcome.reason,
                    misfit=outcome.misfit, predictions=outcome.predictions, source="proposal",
                    seed=7, wall_time_s=1.5)
    run = _from_outcome(outcome)  # what the posterior logs of the same outcome
    frame = runs_to_frame(problem, c[None, :], [run], "proposal", seed=7)
    posterior_row = frame.iloc[0].to_dict()
    stored = json.loads(row["predictions"])
    assert stored["b"] == {"status": "not_converged", "z_m": None, "ion_velocity_m_s": None,
                           "scalars": {}, "reason": "residual 3e-2 after 500 steps"}
    assert stored["a"]["status"] == "ok" and len(stored["a"]["z_m"]) == len(ok.z_m)
    assert json.loads(posterior_row["predictions"]) == stored
    assert row["error"] == posterior_row["error"] == outcome.reason
    assert np.isnan(row["reduced_chi2"]) and np.isnan(posterior_row["reduced_chi2"])
    same = [k for k in row if k != "wall_time_s"]
    assert list(posterior_row) == list(row)
    for k in same:
        a, b = row[k], posterior_row[k]
        assert (isinstance(a, float) and np.isnan(a) and np.isnan(b)) or a == b, k
