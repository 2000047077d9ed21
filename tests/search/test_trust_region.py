"""Trust-region proposals (TuRBO, Eriksson et al. 2019): state replay, box, engine."""

from __future__ import annotations

import numpy as np
import pytest

from profshape.exceptions import ConfigError
from profshape.search import Search, SearchSettings, SearchSpace
from profshape.search.trust_region import (
    GLOBAL,
    LENGTH_INIT,
    LENGTH_MAX,
    LENGTH_MIN,
    TRUST_REGION,
    failure_tolerance,
    trust_region_bounds,
    trust_region_state,
)


def _history(values, n_initial=3):
    """(trial, batch, value, ok) rows: a Sobol design, then one trust-region trial per batch."""
    obs = [(t, 0, 10.0, True) for t in range(n_initial)]
    kinds = {}
    for i, v in enumerate(values):
        t = n_initial + i
        obs.append((t, 1 + i, v, np.isfinite(v)))
        kinds[t] = TRUST_REGION
    return obs, kinds


def test_constants_are_those_of_the_paper():
    # Eriksson et al. (2019), NeurIPS, section 2: L_init = 0.8, L_min = 0.5**7, L_max = 1.6,
    # success tolerance 3, failure tolerance ceil(max(4/q, d/q))
    assert (LENGTH_INIT, LENGTH_MIN, LENGTH_MAX) == (0.8, 0.5**7, 1.6)
    assert failure_tolerance(4, 1) == 4 and failure_tolerance(10, 1) == 10
    assert failure_tolerance(6, 4) == 2


def test_state_expands_after_successes_and_shrinks_after_failures():
    obs, kinds = _history([9.0, 8.0, 7.0])  # three improvements in a row
    assert trust_region_state(obs, kinds, dim=2, q=1).length == pytest.approx(1.6)
    obs, kinds = _history([9.0, 8.0, 7.0, 6.0, 5.0, 4.0])  # capped at L_max
    assert trust_region_state(obs, kinds, dim=2, q=1).length == pytest.approx(1.6)
    obs, kinds = _history([10.0] * 4)  # 4 = ceil(max(4, 2)) failures: halve
    st = trust_region_state(obs, kinds, dim=2, q=1)
    assert st.length == pytest.approx(0.4) and st.failures == 0
    # an improvement smaller than 1e-3 of the best is a failure; a failed run is one too
    obs, kinds = _history([10.0 * (1 - 5e-4), np.nan, 9.0])
    st = trust_region_state(obs, kinds, dim=2, q=1)
    assert (st.successes, st.failures) == (1, 0)
    obs, kinds = _history([10.0 * (1 - 5e-4), np.nan])
    assert trust_region_state(obs, kinds, dim=2, q=1).failures == 2


def test_collapse_restarts_with_a_global_batch():
    # 0.8 / 2**k < 0.5**7 first at k = 7 halvings: 7 * 4 failures
    obs, kinds = _history([10.0] * 27)
    assert not trust_region_state(obs, kinds, dim=2, q=1).restart
    obs, kinds = _history([10.0] * 28)
    st = trust_region_state(obs, kinds, dim=2, q=1)
    assert st.restart and st.n_restarts == 1 and st.length == LENGTH_INIT
    # the global batch that follows clears the restart flag
    obs.append((len(obs), 99, 10.0, True))
    kinds[len(obs) - 1] = GLOBAL
    assert not trust_region_state(obs, kinds, dim=2, q=1).restart
    # unfinished or non-model trials do not count
    obs, kinds = _history([10.0] * 3)
    kinds[99] = TRUST_REGION
    assert trust_region_state(obs, kinds, dim=2, q=1).failures == 3


def test_box_follows_the_lengthscales_and_stays_in_the_cube():
    ls = np.array([0.1, 0.4])
    b = trust_region_bounds(np.array([0.5, 0.5]), ls, 0.4)
    widths = b[1] - b[0]
    # TuRBO box: side L * l_i / (prod l)^(1/d), so the volume is L^d (Eriksson et al. 2019)
    np.testing.assert_allclose(widths, 0.4 * ls / np.sqrt(0.04))
    assert np.prod(widths) == pytest.approx(0.4**2)
    np.testing.assert_allclose(b.mean(axis=0), [0.5, 0.5])
    b = trust_region_bounds(np.array([0.02, 0.99]), ls, 0.8)
    assert np.all(b >= 0) and np.all(b <= 1) and b[0, 0] == 0.0 and b[1, 1] == 1.0


def _drive(strategy, budget=14, seed=1, warmup=0):
    space = SearchSpace(["x", "y"], [[0, 1], [0, 1]])
    s = Search(space, SearchSettings(budget=budget, n_initial=5, seed=seed, strategy=strategy,
                                     trust_region_warmup=warmup,
                                     objective_transform="log", num_restarts=2,
                                     raw_samples=32, progress=False))
    boxes = []
    while not s.stop_reason():
        for p in s.ask():
            boxes.append((p.trial, s.kind_of(p.trial), s.trust_region_bounds_))
            x, y = p.coefficients["x"], p.coefficients["y"]
            s.tell(p.trial, 1.0 + 30 * (x - 0.3) ** 2 + 3 * (y - 0.7) ** 2)
    return s, boxes


def test_engine_proposes_inside_the_box_and_records_the_kind():
    s, boxes = _drive("trust_region")
    props = [o for o in s.observations if o.source == "proposal"]
    assert {s.kind_of(o.trial) for o in props} == {TRUST_REGION}
    for trial, kind, box in boxes:
        if kind == TRUST_REGION:
            u = s.observations[trial].u
            assert np.all(u >= box[0] - 1e-9) and np.all(u <= box[1] + 1e-9)
    assert s.best().value < 1.05  # minimum 1 at (0.3, 0.7)
    h, _ = _drive("hybrid")
    kinds = [h.kind_of(o.trial) for o in h.observations if o.source == "proposal"]
    assert kinds[2] == GLOBAL and kinds[:2] == [TRUST_REGION] * 2  # every third batch global
    g, _ = _drive("global")
    assert {g.kind_of(o.trial) for o in g.observations if o.source == "proposal"} == {GLOBAL}


def test_small_region_proposes_from_a_local_model_of_the_nearby_trials():
    # TuRBO's local model (Eriksson et al. 2019): once the region is smaller than the
    # spread of the trials, the GP of a trust-region proposal is fitted to the trials
    # near the region (at least the design size), standardised on them
    s, boxes = _drive("trust_region", budget=26)
    last_trial, kind, _ = boxes[-1]
    assert kind == TRUST_REGION
    n_ok = sum(o.ok for o in s.observations[:last_trial])
    n_fit = s.objective_model_.train_inputs[0].shape[0]
    assert s.n_initial <= n_fit < n_ok
    # the region's centre, the best trial before the proposal, is among the fitted trials
    best = min((o for o in s.observations[:last_trial] if o.ok), key=lambda o: o.value)
    x = s.objective_model_.train_inputs[0].numpy()
    assert np.any(np.all(np.isclose(x, best.u), axis=1))


def test_warmup_proposals_are_global_then_the_region_starts():
    # default warm-up 2 * d = 4 global proposals after the design (design choice, no source)
    assert SearchSettings(budget=3).resolved_trust_region_warmup(2) == 4
    s, _ = _drive("trust_region", budget=12, warmup=None)
    kinds = [s.kind_of(o.trial) for o in s.observations if o.source == "proposal"]
    assert kinds == [GLOBAL] * 4 + [TRUST_REGION] * 3
    # the warm-up batches leave the region's counters untouched: it starts at L_init
    obs = [(o.trial, o.batch, o.value, o.ok) for o in s.observations[:9]]
    st = trust_region_state(obs, s.proposal_kinds, dim=2, q=1)
    assert (st.length, st.successes, st.failures) == (LENGTH_INIT, 0, 0)
    with pytest.raises(ConfigError, match=r"SearchSettings.trust_region_warmup must be >= 0"):
        SearchSettings(budget=3, trust_region_warmup=-1)


def test_restored_search_proposes_the_same_trust_region_trial():
    a, _ = _drive("trust_region", budget=10)
    settings = a.settings
    b = Search(a.space, settings)
    b.restore(a.observations[:8], [], {"next_trial": 8, "next_batch": 8, "n_sobol": 5,
                                       "n_user": 0},
              a.warm_start(), {str(t): k for t, k in a.proposal_kinds.items() if t < 8})
    c = Search(a.space, settings)
    c.restore(a.observations[:8], [], {"next_trial": 8, "next_batch": 8, "n_sobol": 5,
                                       "n_user": 0},
              a.warm_start(), {t: k for t, k in a.proposal_kinds.items() if t < 8})
    assert b.trust_region() == c.trust_region()
    np.testing.assert_array_equal(b.ask()[0].u, c.ask()[0].u)
    # interrupted inside the warm-up: the resumed search finishes it and then starts the
    # region exactly as the uninterrupted one did
    a, _ = _drive("trust_region", budget=11, warmup=None)
    r = Search(a.space, a.settings)
    r.restore(a.observations[:7], [], {"next_trial": 7, "next_batch": 7, "n_sobol": 5,
                                       "n_user": 0},
              a.warm_start(), {str(t): k for t, k in a.proposal_kinds.items() if t < 7})
    for t in range(7, 11):
        (p,) = r.ask()
        assert r.kind_of(p.trial) == a.kind_of(t)
        np.testing.assert_allclose(p.u, a.observations[t].u, atol=1e-6)
        r.tell(p.trial, a.observations[t].value)


def test_strategy_is_validated():
    with pytest.raises(ConfigError, match=r"SearchSettings.strategy must be one of"):
        SearchSettings(budget=3, strategy="local")
