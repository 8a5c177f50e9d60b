"""Seasonal naive: hand-computed cases, the robust variant's level correction, edge cases."""

from __future__ import annotations

import statistics

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from floorcast.core.forecasting import ForecastError, method, seasonal_naive
from floorcast.core.forecasting.seasonal_naive import ROBUST_SEASONS, forecast


def test_registry_points_here():
    assert method("seasonal-naive") is forecast


# --- hand-computed ------------------------------------------------------------------


def test_plain_repeats_the_last_season_beyond_one_season():
    y = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0]
    # Hand-computed: the last season is (4, 5, 6); horizon 7 wraps around twice.
    assert forecast(y, season=3, horizon=7).tolist() == [[4, 5, 6, 4, 5, 6, 4]]
    assert forecast(y, season=3, horizon=0).shape == (1, 0)


def test_season_zero_is_the_naive_forecast():
    assert forecast([3.0, 1.0, 7.5], season=0, horizon=4).tolist() == [[7.5] * 4]


def test_robust_median_and_level_hand_computed():
    # Seasons (1, 2, 3), (10, 2, 3), (1, 5, 3). Per-phase medians: med(1, 10, 1) = 1,
    # med(2, 2, 5) = 2, med(3, 3, 3) = 3 -> profile (1, 2, 3), mean 2. Last season's
    # mean is 3, so the level correction adds 1: (2, 3, 4).
    y = [1.0, 2.0, 3.0, 10.0, 2.0, 3.0, 1.0, 5.0, 3.0]
    for phase, column in enumerate(([1, 10, 1], [2, 2, 5], [3, 3, 3])):
        # Python's statistics.median as the outside reference for the per-phase median.
        assert statistics.median(column) == [1, 2, 3][phase]
    got = forecast(y, season=3, horizon=4, seasons=3)
    assert got.tolist() == [[2.0, 3.0, 4.0, 2.0]]
    assert forecast(y, season=3, horizon=3, seasons=3, level=False).tolist() == [[1, 2, 3]]


def test_robust_variant_ignores_one_bad_season():
    profile = np.array([1.0, 4.0, 9.0, 4.0])
    y = np.tile(profile, 4)
    y[4:8] += [50.0, -3.0, 20.0, 7.0]  # an incident in the second of the last three seasons
    assert np.allclose(
        forecast(y, season=4, horizon=8, seasons=ROBUST_SEASONS), np.tile(profile, 2)
    )
    # The plain method would copy an incident in the last season; the robust one does not.
    y2 = np.tile(profile, 4)
    y2[-4:-2] += 30.0
    plain = forecast(y2, season=4, horizon=4)
    robust = forecast(y2, season=4, horizon=4, seasons=3, level=False)
    assert np.abs(plain - profile).max() == 30.0
    assert np.allclose(robust, profile)


# --- level correction ---------------------------------------------------------------


def _trending(seasons: int, season: int, slope: float, noise: float, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(seasons * season)
    shape = 3.0 + np.sin(2 * np.pi * t / season) + 0.5 * np.cos(4 * np.pi * t / season)
    return shape + slope * t + noise * rng.standard_normal((8, t.size))


def test_level_correction_beats_plain_averaging_on_a_trend():
    season, horizon = 48, 48
    y = _trending(10, season, slope=0.004, noise=0.05, seed=1)
    history, future = y[:, :-horizon], y[:, -horizon:]

    corrected = forecast(history, season=season, horizon=horizon, seasons=3)
    median_only = forecast(history, season=season, horizon=horizon, seasons=3, level=False)
    past = history[:, -3 * season :].reshape(8, 3, season)
    mean_only = past.mean(axis=1)  # plain averaging of the same phase, no correction

    def mae(f):
        return np.abs(f - future).mean()

    assert mae(corrected) < 0.6 * mae(median_only)
    assert mae(corrected) < 0.6 * mae(mean_only)


def test_level_corrected_equals_plain_on_line_plus_cycle():
    # The module docstring's claim: on an exact line plus a periodic shape the median
    # sits on the middle season and the correction moves it to the last one.
    y = _trending(5, 24, slope=0.3, noise=0.0, seed=0)
    robust = forecast(y, season=24, horizon=50, seasons=3)
    plain = forecast(y, season=24, horizon=50)
    assert np.allclose(robust, plain, atol=1e-9)


# --- edge cases ---------------------------------------------------------------------


@pytest.mark.parametrize("seasons", [1, 2, 3, 5])
@pytest.mark.parametrize("season", [0, 1, 7])
def test_constant_series_forecast_as_the_constant(season, seasons):
    y = np.full((3, 40), 2.5)
    got = forecast(y, season=season, horizon=17, seasons=seasons)
    assert got.shape == (3, 17)
    assert np.all(got == 2.5)


@settings(max_examples=60, deadline=None)
@given(
    y=hnp.arrays(
        np.float64,
        st.tuples(st.integers(1, 4), st.integers(12, 40)),
        elements=st.floats(-1e6, 1e6, allow_nan=False),
    ),
    season=st.integers(0, 4),
    seasons=st.integers(1, 3),
    horizon=st.integers(0, 30),
)
def test_forecasts_are_finite_and_rowwise(y, season, seasons, horizon):
    got = forecast(y, season=season, horizon=horizon, seasons=seasons)
    assert got.shape == (y.shape[0], horizon)
    assert np.all(np.isfinite(got))
    # Vectorized over the batch: each row is what that series alone would get.
    for row in range(y.shape[0]):
        one = forecast(y[row], season=season, horizon=horizon, seasons=seasons)
        assert np.array_equal(one[0], got[row])


def test_too_short_history_is_a_clear_forecast_error():
    with pytest.raises(ForecastError, match=r"3 season\(s\) of 24 steps needs at least 72 "):
        forecast(np.ones(71), season=24, horizon=5, seasons=3)
    with pytest.raises(ForecastError, match="needs at least 24 observations, the history has 23"):
        forecast(np.ones(23), season=24, horizon=5)
    with pytest.raises(ForecastError, match="naive forecast needs at least 1"):
        forecast(np.ones((2, 0)), season=0, horizon=5)


@pytest.mark.parametrize(
    "kwargs", [{"season": -1}, {"horizon": -2}, {"seasons": 0}, {"season": 2.5}, {"season": True}]
)
def test_bad_arguments_are_rejected(kwargs):
    args = {"season": 3, "horizon": 3, "seasons": 1, **kwargs}
    with pytest.raises(ForecastError, match="must be an integer"):
        seasonal_naive.forecast(np.ones(20), **args)


def test_non_finite_history_is_rejected_by_row():
    y = np.ones((3, 10))
    y[1, 4] = np.nan
    with pytest.raises(ForecastError, match=r"series \[1\]"):
        forecast(y, season=2, horizon=2)
