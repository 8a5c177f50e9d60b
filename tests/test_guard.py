"""core.guard, core.floor_cost and core.buckets against hand computations."""

from __future__ import annotations

import numpy as np
import pytest

from floorcast.core import buckets, floor_cost, guard


def _settings(window: float = 120.0, **kw: float) -> guard.Settings:
    base = {"max_error": 0.5, "max_exceedance": 0.5, "recover_after": 60.0, "min_level": 1.0}
    return guard.Settings(window=window, **{**base, **kw})


def test_wape_and_exceedance_match_a_hand_computation() -> None:
    """WAPE = Σ|a − f| / Σ|a| (the MAE of Hyndman & Athanasopoulos, FPP 3rd ed., §5.8,
    over the mean actual), here time-weighted. Four observations held 30 s each:
    |a − f| = 2, 2, 10, 0 and a = 10, 10, 20, 5, so WAPE = 30·14 / (30·45) = 14/45;
    only the third (20 > 15) is above the sized load: 30 s of 120 s = 0.25."""
    obs = [(10, 8, 12), (10, 12, 12), (20, 10, 15), (5, 5, 6), (7, 7, 9)]
    st = guard.State.empty(1, 120.0)
    s = _settings()
    for i, (a, f, u) in enumerate(obs):
        st, r = guard.update(st, np.array([a]), np.array([f]), np.array([u]), 30.0 * i, s)
    assert r.error[0] == pytest.approx(14 / 45)
    assert r.exceedance[0] == pytest.approx(0.25)
    assert r.observed[0] == pytest.approx(1.0)
    assert r.verdict[0] == guard.GOOD
    # The same figures as numpy's weighted average of |a − f| over that of a.
    a, f = np.array([10, 10, 20, 5.0]), np.array([8, 12, 10, 5.0])
    w = np.full(4, 30.0)
    assert r.error[0] == pytest.approx(np.average(np.abs(a - f), weights=w) /
                                       np.average(a, weights=w))  # fmt: skip


def test_irregular_timing_weighs_each_observation_by_the_time_it_held() -> None:
    """A 10 s and a 50 s interval: the second observation weighs 5×; a gap beyond
    max_hold (30 s for a 120 s window) counts as max_hold only."""
    s = _settings()
    st = guard.State.empty(1, 120.0)
    for t, a in ((0.0, 10.0), (10.0, 20.0), (40.0, 10.0)):  # 20 holds 30 s (capped at 30)
        st, r = guard.update(st, np.array([a]), np.array([10.0]), np.array([100.0]), t, s)
    # Σw|a−f| = 10·0 + 30·10 = 300; Σwa = 10·10 + 30·20 = 700.
    assert r.error[0] == pytest.approx(300 / 700)
    st2 = guard.State.empty(1, 120.0)
    for t in (0.0, 100.0):  # one observation, then a gap of 100 s
        st2, r2 = guard.update(st2, np.array([10.0]), np.array([5.0]), np.array([20.0]), t, s)
    assert r2.observed[0] == pytest.approx(30 / 120)  # capped: not the whole window
    assert r2.verdict[0] == guard.UNJUDGED
    st2, r2 = guard.update(st2, np.array([10.0]), np.array([5.0]), np.array([20.0]), 400.0, s)
    assert r2.observed[0] == 0.0  # a pause longer than the window forgets everything


def test_no_data_never_trips_and_too_little_load_is_not_judged() -> None:
    s = _settings()
    t = np.arange(0, 600, 10.0)
    nan = np.full(t.size, np.nan)
    tripped, err, _ = guard.track(nan[None], np.full(t.size, 5.0), np.full(t.size, 6.0), t, s)
    assert not tripped.any() and np.isnan(err).all()
    # Forecast 10× the load, but the load is below one replica (min_level 1).
    tripped, err, _ = guard.track(np.full((1, t.size), 0.2), np.full(t.size, 2.0),
                                  np.full(t.size, 3.0), t, s)  # fmt: skip
    assert not tripped.any() and err[0, -1] == pytest.approx(9.0)


def test_trips_then_recovers_after_the_hold_off() -> None:
    s = _settings(window=120.0, recover_after=60.0)
    t = np.arange(0, 900, 10.0)
    actual = np.where((t >= 200) & (t < 400), 30.0, 10.0)  # 3× the forecast for 200 s
    tripped, err, exc = guard.track(actual[None], np.full(t.size, 10.0), np.full(t.size, 12.0),
                                    t, s)  # fmt: skip
    first = t[np.argmax(tripped[0])]
    assert 200 < first <= 300  # within the window of the departure
    back = t[(t > first) & ~tripped[0]][0]
    # The bad part leaves the window ~120 s after the load returns (t = 400), then
    # the figures must stay good for recover_after (60 s).
    assert 400 + 60 <= back <= 400 + 120 + 60 + 10
    assert not tripped[0, t >= back].any()
    assert np.nanmax(err[0]) > s.max_error and np.nanmax(exc[0]) > s.max_exceedance


def test_track_does_not_look_ahead() -> None:
    rng = np.random.default_rng(3)
    t = np.arange(0, 2000, 15.0)
    a = rng.uniform(5, 30, (2, t.size))
    f = np.full(t.size, 12.0)
    s = _settings(window=300.0)
    base = guard.track(a, f, f * 1.2, t, s)
    b = a.copy()
    b[:, 80:] = 1000.0  # change only the future of column 79
    other = guard.track(b, f, f * 1.2, t, s)
    for x, y in zip(base, other, strict=True):
        np.testing.assert_array_equal(x[:, :80], y[:, :80])


def test_buckets_forget_a_whole_lap_and_count_only_the_window() -> None:
    r = buckets.Ring.empty(1, 4, 1, 10.0)
    r = buckets.add(r, np.array([[1.0]]), 5.0)
    r = buckets.add(r, np.array([[2.0]]), 15.0)
    assert buckets.total(r, 35.0)[0, 0] == 3.0  # epochs 0, 1 inside (3 − 4, 3]
    assert buckets.total(r, 45.0)[0, 0] == 2.0  # epoch 0 fell out
    r = buckets.add(r, np.array([[4.0]]), 45.0)  # same slot as epoch 0: replaced
    assert buckets.total(r, 45.0)[0, 0] == 6.0


def test_floor_cost_hand_computation() -> None:
    """Kubernetes HPA docs: desired = ceil(currentReplicas × current / target).
    4 replicas at 60 % of an 80 % target want ceil(3.0) = 3; a floor of 10 adds 7;
    held 300 s, 300 s and (after a 3400 s gap) the 300 s cap: 7 × 900 s = 1.75 h."""
    alone = floor_cost.hpa_alone(np.array([4]), np.array([60]), np.array([80]),
                                 baseline=np.array([2]), maximum=np.array([20]))  # fmt: skip
    assert alone[0] == 3.0
    assert floor_cost.added(np.array([10]), alone)[0] == 7.0
    assert floor_cost.added(np.array([2]), alone)[0] == 0.0
    # Below the baseline the HPA alone keeps the baseline.
    low = floor_cost.hpa_alone(np.array([2]), np.array([10]), np.array([80]),
                               baseline=np.array([2]), maximum=np.array([20]))  # fmt: skip
    assert low[0] == 2.0
    st = floor_cost.State.empty(1)
    for t in (0.0, 300.0, 600.0, 4000.0):  # the last after a 3400 s gap: capped at 300
        st = floor_cost.update(st, np.array([7.0]), t)
    assert floor_cost.replica_hours(st, 4000.0)[0] == pytest.approx(7 * 900 / 3600)
    # A day later all of it has left the window.
    assert floor_cost.replica_hours(st, 4000.0 + 86400.0)[0] == 0.0
