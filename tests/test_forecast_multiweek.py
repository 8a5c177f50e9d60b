"""The multi-season averages (``multiweek``) and the double-seasonal registry entry."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from floorcast.core import forecasting
from floorcast.core.forecasting import holt_winters, multiweek
from floorcast.core.forecasting.base import ForecastError, HistoryTooShort

WEEK = 7 * 24  # hourly steps
RNG = np.random.default_rng(13)


def weekly(weeks: int, n: int = 3, noise: float = 2.0) -> np.ndarray:
    t = np.arange(weeks * WEEK)
    shape = 50 + 30 * np.sin(2 * np.pi * t / 24) + 10 * (t % WEEK >= 5 * 24)
    return shape + RNG.normal(0, noise, size=(n, len(t)))


@pytest.mark.parametrize(
    ("how", "k"),
    [("mean", 4), ("median", 5), ("trimmed", 6)],
)
def test_profiles_match_numpy_and_scipy_without_level(how, k):
    y = weekly(8)
    got = multiweek.forecast(y, season=WEEK, horizon=30, how=how, level=False)
    past = y[:, -k * WEEK :].reshape(3, k, WEEK)
    # References: numpy mean/median over the k past weeks; scipy.stats.trim_mean
    # cutting one value at each end (proportiontocut = 1/k).
    ref = {
        "mean": past.mean(axis=1),
        "median": np.median(past, axis=1),
        "trimmed": stats.trim_mean(past, 1 / k, axis=1),
    }[how]
    assert np.allclose(got, ref[:, :30])
    assert multiweek.WEEKS[how] == k


def test_level_adjustment_follows_weekly_growth():
    # Every week 5 % busier than the one before: the unadjusted mean of four weeks
    # lags by 1.5 weeks of growth; the adjusted one sits at the last week's level.
    base = weekly(1, n=1, noise=0.0)[0]
    y = np.concatenate([base * 1.05**w for w in range(6)])[None, :]
    flat = multiweek.forecast(y, season=WEEK, horizon=WEEK, how="mean", level=False)
    adjusted = multiweek.forecast(y, season=WEEK, horizon=WEEK, how="mean")
    assert np.allclose(adjusted, y[:, -WEEK:])  # same shape, last week's level
    assert flat.mean() < 0.95 * y[:, -WEEK:].mean()


def test_one_odd_day_does_not_rescale_the_week():
    y = weekly(6, n=1, noise=0.0)
    y[0, -WEEK : -WEEK + 24] *= 0.1  # an outage on the last Monday
    got = multiweek.forecast(y, season=WEEK, horizon=WEEK, how="median")
    # median of the seven daily ratios is 1: the other six days are normal
    assert np.allclose(got[0, 24:], y[0, -2 * WEEK + 24 : -WEEK])


def test_median_ignores_one_bad_week_where_the_mean_copies_it():
    y = weekly(5, n=1, noise=0.0)
    y[0, -3 * WEEK : -2 * WEEK] *= 3  # a load test three weeks ago
    normal = y[0, -WEEK:]
    med = multiweek.forecast(y, season=WEEK, horizon=WEEK, how="median", level=False)
    mean = multiweek.forecast(y, season=WEEK, horizon=WEEK, how="mean", level=False)
    assert np.allclose(med[0], normal)
    assert mean[0].mean() > 1.4 * normal.mean()


def test_short_history_uses_the_seasons_it_has_and_refuses_fewer_than_two():
    y = weekly(3)
    got = multiweek.forecast(y, season=WEEK, horizon=5, how="mean", level=False)
    assert np.allclose(got, y.reshape(3, 3, WEEK).mean(axis=1)[:, :5])
    with pytest.raises(HistoryTooShort, match="at least 336"):
        multiweek.forecast(y[:, : WEEK + 10], season=WEEK, horizon=5)
    with pytest.raises(ForecastError, match="season"):
        multiweek.forecast(y, season=0, horizon=5)
    with pytest.raises(ForecastError, match="profile"):
        multiweek.forecast(y, season=WEEK, horizon=5, how="mode")


def test_registered_methods_run_and_never_return_nan():
    y = np.abs(weekly(6))
    for name in ("seasonal-average", "seasonal-mean", "seasonal-median", "seasonal-trimmed"):
        out = forecasting.method(name)(y, season=WEEK, horizon=48)
        assert out.shape == (3, 48) and np.all(np.isfinite(out))


def test_double_seasonal_method_reads_the_season_as_week_or_day():
    assert holt_winters.day_and_week(2016) == (288, 2016)  # a week of 5-minute steps
    assert holt_winters.day_and_week(288) == (288, 2016)  # a day of them
    assert holt_winters.day_and_week(48 * 7) == (48, 336)
    y = weekly(3, n=2, noise=1.0) + 20
    got = forecasting.method("holt-winters-double")(y, season=WEEK, horizon=24)
    ref = holt_winters.forecast(y, season=24, season2=WEEK, horizon=24)
    assert np.allclose(got, ref)
    with pytest.raises(HistoryTooShort):
        forecasting.method("holt-winters-double")(y[:, : WEEK + 5], season=24, horizon=24)
