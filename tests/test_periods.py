"""Period detection: daily/weekly found on synthetic load, nothing on noise, ACF checks."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from statsmodels.tsa.stattools import acf as sm_acf

from floorcast.core.forecasting import ForecastError, periods
from floorcast.core.forecasting.periods import DAY, PEAK_RATIO, WEEK, acf, detect_period

STEP = 300  # 5 minutes
D, W = DAY // STEP, WEEK // STEP  # 288, 2016 steps
T = 14 * D


def _daily(t: np.ndarray, steps_per_day: int = D) -> np.ndarray:
    x = t / steps_per_day
    return 1 + np.sin(2 * np.pi * x - 1) + 0.4 * np.sin(4 * np.pi * x)


def _load(n: int, *, weekend: float, noise: float, seed: int, steps_per_day: int = D):
    """Daily shape, optionally lower on two days in seven, with trend and noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(14 * steps_per_day)
    off = ((t // steps_per_day) % 7 >= 5).astype(float)
    scale = rng.uniform(0.5, 5.0, (n, 1))
    clean = _daily(t, steps_per_day) * (1 - weekend * off) + 0.00005 * t
    return scale * (clean + noise * rng.standard_normal((n, t.size)))


# --- the autocorrelation against statsmodels ----------------------------------------


@pytest.mark.parametrize("seed", [0, 1])
def test_acf_matches_statsmodels(seed):
    rng = np.random.default_rng(seed)
    y = np.vstack([_load(1, weekend=0.3, noise=0.2, seed=seed)[0], rng.standard_normal(T)])
    lags = np.arange(0, 2 * W, 7)  # up to the weekly lag and beyond
    ours = acf(y, lags)
    for row in range(2):
        # statsmodels.tsa.stattools.acf (adjusted=False, the default) as the reference.
        ref = sm_acf(y[row], nlags=int(lags[-1]), fft=False)
        assert np.allclose(ours[row], ref[lags], atol=1e-12)


def test_acf_of_a_constant_is_zero_and_lags_are_checked():
    assert np.all(acf(np.full((2, 50), 3.0), [0, 1, 10]) == 0.0)
    with pytest.raises(ForecastError, match="lag 50 is outside"):
        acf(np.ones(50), [50])


def test_acf_bound_matches_simulated_white_noise():
    # Monte-Carlo check of the Ljung–Box variance (n - k) / (n (n + 2)) at the weekly
    # lag of a two-week history: the simulated standard deviation agrees within 10 %.
    rng = np.random.default_rng(4)
    r = acf(rng.standard_normal((1500, T)), [W])[:, 0]
    assert np.std(r) == pytest.approx(periods._acf_bound(T, W) / 2, rel=0.1)
    assert periods._acf_bound(T, W) < 2 / np.sqrt(T)


def test_peak_threshold_false_alarm_per_harmonic():
    # Under white noise a periodogram ordinate over the mean of b others is F(2, 2b);
    # scipy.stats.f as the reference for the tail the module docstring quotes.
    for b, worst in ((9, 1.6e-4), (16, 2.6e-5)):
        tail = stats.f.sf(PEAK_RATIO, 2, 2 * b)
        assert tail < worst
        assert tail == pytest.approx((1 + PEAK_RATIO / b) ** -b, rel=1e-9)  # closed form


# --- detection ----------------------------------------------------------------------


def test_finds_daily_and_weekly_in_a_mixture():
    y = _load(30, weekend=0.4, noise=0.3, seed=1)
    res = detect_period(y, step_seconds=STEP)
    assert res.candidates == (D, W)
    assert res.found.all()
    assert res.periods(0) == [D, W]
    assert res.season(0) == W
    assert res.seasons.tolist() == [W] * 30


def test_finds_only_daily_without_a_weekly_component():
    y = _load(30, weekend=0.0, noise=0.3, seed=2)
    res = detect_period(y, step_seconds=STEP)
    assert res.found[:, 0].all()
    assert not res.found[:, 1].any()
    assert res.periods(3) == [D]
    assert set(res.seasons.tolist()) == {D}


def test_removing_the_daily_profile_does_not_bias_the_weekly_acf():
    # The module's correction: after subtracting a daily profile estimated from the
    # same data, pure noise plus a daily shape has weekly-lag ACF about zero on average.
    res = detect_period(_load(400, weekend=0.0, noise=0.5, seed=9), step_seconds=STEP)
    assert res.found[:, 0].all()
    assert abs(res.acf[:, 1].mean()) < 0.004  # the uncorrected bias is about -0.038


def test_no_season_in_white_noise():
    rng = np.random.default_rng(5)
    res = detect_period(5 + rng.standard_normal((300, T)), step_seconds=STEP)
    assert not res.found.any()
    assert res.seasons.tolist() == [0] * 300
    assert res.periods(0) == [] and res.season(0) == 0


def test_no_season_in_a_random_walk():
    # Decision: a random walk has no season. Its ACF is high at every lag (so test 1
    # alone would say yes), but there is no local spectral peak.
    rng = np.random.default_rng(6)
    walk = 100 + np.cumsum(rng.standard_normal((300, T)), axis=1)
    res = detect_period(walk, step_seconds=STEP)
    assert (res.acf > np.asarray(res.acf_bound)).mean() > 0.3  # ACF alone is fooled
    assert res.found.mean() <= 0.01


def test_constant_series_has_no_season():
    res = detect_period(np.full((2, T), 4.0), step_seconds=STEP)
    assert not res.found.any()
    assert np.all(np.isfinite(res.acf)) and np.all(res.peak_ratio == 0)


def test_other_step_sizes():
    y = _load(5, weekend=0.4, noise=0.2, seed=3, steps_per_day=144)  # 10-minute steps
    res = detect_period(y, step_seconds=600)
    assert res.candidates == (144, 1008)
    assert res.found.all()


def test_candidates_longer_than_half_the_history_are_untestable():
    y = _load(3, weekend=0.4, noise=0.2, seed=4)[:, : 10 * D]  # ten days
    res = detect_period(y, step_seconds=STEP)
    assert res.testable == (True, False)
    assert res.found[:, 0].all() and not res.found[:, 1].any()
    assert res.acf_bound[1] == 0.0


def test_bad_input():
    with pytest.raises(ForecastError, match="step_seconds must be positive"):
        detect_period(np.ones(100), step_seconds=0)
    with pytest.raises(ForecastError, match="needs at least 4"):
        detect_period(np.ones(3), step_seconds=STEP)
    with pytest.raises(ForecastError, match="NaN"):
        detect_period(np.array([1.0, np.nan, 2.0, 3.0, 4.0]), step_seconds=STEP)
