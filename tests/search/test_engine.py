"""The stepwise search: design, determinism, failures, stop rules, test functions."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from botorch.test_functions import Branin, Hartmann

from profshape.exceptions import ConfigError, InputDataError
from profshape.search import Search, SearchSettings, SearchSpace
from profshape.search.design import sobol_points


def _fast(**kw):
    base = dict(objective_transform="identity", num_restarts=4, raw_samples=128, progress=False)
    base.update(kw)
    return SearchSettings(**base)


def _drive(fn, settings, q=1):
    space = SearchSpace([f"x{i}" for i in range(fn.dim)], fn.bounds.T.numpy())
    s = Search(space, settings)
    while not s.stop_reason():
        for p in s.ask(q):
            x = torch.tensor([[p.coefficients[n] for n in space.names]], dtype=torch.float64)
            s.tell(p.trial, float(fn(x)))
    return s


def test_branin_within_one_percent():
    # Dixon and Szego (1978) global minimum of Branin: 0.397887 (botorch.test_functions)
    fn = Branin()
    s = _drive(fn, _fast(budget=40, seed=2))
    assert fn.optimal_value == pytest.approx(0.397887, abs=1e-6)
    assert s.best().value <= fn.optimal_value * 1.01
    assert s.stop_reason() == "budget"


def test_hartmann6_within_five_percent():
    # Dixon and Szego (1978) global minimum of Hartmann-6: -3.32237 (botorch.test_functions)
    fn = Hartmann(dim=6)
    s = _drive(fn, _fast(budget=45, seed=0, num_restarts=3, raw_samples=96))
    assert fn.optimal_value == pytest.approx(-3.32237, abs=1e-5)
    assert s.best().value <= fn.optimal_value * 0.95


def test_same_seed_same_trials_and_batches():
    fn = Branin()
    a = _drive(fn, _fast(budget=9, n_initial=4, batch_size=2, seed=5), q=2)
    b = _drive(fn, _fast(budget=9, n_initial=4, batch_size=2, seed=5), q=2)
    c = _drive(fn, _fast(budget=9, n_initial=4, batch_size=2, seed=6), q=2)
    ua = np.array([o.u for o in a.observations])
    np.testing.assert_array_equal(ua, np.array([o.u for o in b.observations]))
    assert not np.allclose(ua, np.array([o.u for o in c.observations]))
    assert [o.source for o in a.observations][:4] == ["initial"] * 4
    assert "proposal" in {o.source for o in a.observations}


def test_default_design_size_and_sobol_stratification():
    s = Search(SearchSpace(["a", "b", "c"], [[0, 1]] * 3), SearchSettings(budget=20))
    assert s.n_initial == 7  # 2 d + 1 (common practice, no source)
    # Owen-scrambled Sobol points keep the (0, m, d)-net property in 1-D projections:
    # each of the 2^m equal intervals holds exactly one of the first 2^m points
    # (Owen 1997, SIAM J. Numer. Anal. 34:1884).
    pts = sobol_points(8, 3, seed=1)
    for j in range(3):
        assert sorted(np.floor(pts[:, j] * 8).astype(int)) == list(range(8))


def test_user_points_first_and_validated():
    space = SearchSpace(["a", "b"], [[0, 10], [-1, 1]])
    s = Search(space, SearchSettings(budget=5, n_initial=2,
                                     initial_points=[{"a": 2.0, "b": 0.5}, [5.0, 0.0]]))
    props = s.ask(3)
    assert [p.source for p in props] == ["user", "user", "initial"]
    assert props[0].coefficients == pytest.approx({"a": 2.0, "b": 0.5})
    with pytest.raises(InputDataError, match=r"initial_points\[0\].*missing \['b'\]"):
        Search(space, SearchSettings(budget=5, initial_points=[{"a": 1.0}]))
    with pytest.raises(InputDataError, match=r"initial_points\[0\]: \['a'\] outside"):
        Search(space, SearchSettings(budget=5, initial_points=[[11.0, 0.0]]))


def test_failures_train_feasibility_model_and_never_reach_objective_gp():
    space = SearchSpace(["x", "y"], [[0, 1], [0, 1]])
    s = Search(space, _fast(budget=16, n_initial=6, seed=3, objective_transform="log"))
    while not s.stop_reason():
        for p in s.ask():
            x, y = p.coefficients["x"], p.coefficients["y"]
            s.tell(p.trial, None if x > 0.6 else 1.0 + (x - 0.3) ** 2 + (y - 0.5) ** 2)
    assert s.n_failed >= 1
    s.fit()  # refit on all finished trials
    assert s.feasibility_model_ is not None
    train_y = s.objective_model_.train_targets
    assert torch.all(torch.isfinite(train_y))
    assert len(train_y) == s.n_finished - s.n_failed
    late = [o for o in s.observations if o.source == "proposal"]
    assert np.mean([o.ok for o in late]) >= 0.7  # the search learned to avoid x > 0.6
    assert s.best_coefficients()["x"] == pytest.approx(0.3, abs=0.15)


def test_stop_rules_target_and_patience():
    space = SearchSpace(["x"], [[0, 1]])
    s = Search(space, _fast(budget=50, n_initial=3, target_reduced_chi2=2.0,
                            objective_transform="log"))
    while not s.stop_reason():
        for p in s.ask():
            s.tell(p.trial, 1.0 + 50 * (p.coefficients["x"] - 0.4) ** 2)
    assert s.stop_reason() == "target" and s.best().value <= 2.0
    s = Search(space, _fast(budget=50, n_initial=3, patience=3, objective_transform="log"))
    while not s.stop_reason():
        for p in s.ask():
            s.tell(p.trial, 5.0)  # flat: nothing ever improves on the first
    assert s.stop_reason() == "patience" and s.n_finished == 6


def test_model_and_acquisition_exposed_for_plots():
    space = SearchSpace(["x", "y"], [[0, 1], [0, 1]])
    s = Search(space, _fast(budget=8, n_initial=5, objective_transform="log"))
    for _ in range(6):
        for p in s.ask():
            s.tell(p.trial, 1.0 + p.coefficients["x"] ** 2)
    mean, std = s.predict(np.array([[0.0, 0.5], [1.0, 0.5]]))
    assert mean[0] < mean[1] and np.all(std > 0)
    vals = s.acquisition_(torch.rand(7, 1, 2, dtype=torch.float64))
    assert vals.shape == (7,)


def test_tell_and_settings_errors_name_the_field():
    s = Search(SearchSpace(["x"], [[0, 1]]), SearchSettings(budget=3))
    with pytest.raises(InputDataError, match="trial 7 is not pending"):
        s.tell(7, 1.0)
    with pytest.raises(ConfigError, match=r"SearchSettings.budget must be >= 1"):
        SearchSettings(budget=0)
    with pytest.raises(ConfigError, match=r"SearchSettings.target_reduced_chi2"):
        SearchSettings(budget=3, target_reduced_chi2=-1.0)
    with pytest.raises(ConfigError, match="raw_samples"):
        SearchSettings(budget=3, num_restarts=10, raw_samples=5)


def test_warm_start_kept_for_restore_and_threads_restored():
    space = SearchSpace(["x", "y"], [[0, 1], [0, 1]])
    settings = _fast(budget=12, n_initial=5, seed=4, objective_transform="log")

    def f(p):
        return 1.0 + (p.coefficients["x"] - 0.3) ** 2 + (p.coefficients["y"] - 0.6) ** 2

    threads = torch.get_num_threads()
    a = Search(space, settings)
    while a.n_issued < 8:
        for p in a.ask():
            a.tell(p.trial, f(p))
    assert torch.get_num_threads() == threads  # the search's one thread is given back
    warm = a.warm_start()
    assert set(warm) == {"objective"} and warm["objective"]
    # a search restored from the same log (with the warm start) proposes the same next trial
    b = Search(space, settings)
    b.restore(a.observations, [], a.state(), warm)
    np.testing.assert_array_equal(a.ask()[0].u, b.ask()[0].u)
