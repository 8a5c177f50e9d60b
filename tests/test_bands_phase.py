"""Bands calibrated per slice of the day, held-out band scores, WAPE and quantile loss."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import mean_absolute_error, mean_pinball_loss

from floorcast.core.forecasting import bands, evaluation
from floorcast.core.forecasting.engine import forecast_batch

DAY = 48  # half-hourly
RNG = np.random.default_rng(11)


def test_wape_and_weighted_quantile_loss_match_sklearn():
    y = RNG.uniform(1, 10, size=200)
    f = y + RNG.normal(0, 1, size=200)
    b = f + 1.5
    # References: sklearn.metrics.mean_absolute_error and mean_pinball_loss.
    assert evaluation.wape(y[None], f[None])[0] == pytest.approx(
        100 * mean_absolute_error(y, f) / np.mean(np.abs(y))
    )
    wql = evaluation.weighted_quantile_loss(y[None], (b[None],), (0.9,))[0]
    assert wql == pytest.approx(100 * 2 * mean_pinball_loss(y, b, alpha=0.9) / np.mean(y))
    # at q = 0.5 the weighted quantile loss of the point forecast is its WAPE
    half = evaluation.weighted_quantile_loss(y[None], (f[None],), (0.5,))[0]
    assert half == pytest.approx(evaluation.wape(y[None], f[None])[0])
    assert np.isnan(evaluation.wape(np.zeros((1, 5)), np.ones((1, 5)))[0])


def test_phase_period_is_the_day():
    assert bands.phase_period(2016) == 288 and bands.phase_period(288) == 288
    assert bands.phase_period(7 * 24) == 24 and bands.phase_period(0) == 0
    assert bands.phase_bin(np.array([0, 11, 12, 287, 288]), 288).tolist() == [0, 0, 1, 23, 0]


def busy_days(days: int, n: int) -> np.ndarray:
    """A daily shape whose noise is 6× larger from 08:00 to 20:00 than at night."""
    t = np.arange(days * DAY)
    hour = (t % DAY) / 2
    busy = (hour >= 8) & (hour < 20)
    sd = np.where(busy, 3.0, 0.5)
    return 40 + 20 * busy + RNG.normal(0, 1, size=(n, len(t))) * sd


def test_bands_are_calibrated_in_busy_hours_and_at_night():
    # Synthetic, 300 series: seasonal naive's error is ε_new − ε_old, so the 10–90 %
    # band should hold ~80 % of tomorrow in each slice of the day, and the upper bound
    # ~90 %. One width for the whole day would cover ~100 % at night and far less
    # than 80 % in the busy hours.
    y = busy_days(16, 300)
    hist, future = y[:, : 15 * DAY], y[:, 15 * DAY :]
    res = forecast_batch(hist, step="30m", horizon=DAY, season=DAY, method="seasonal-naive")
    hour = np.arange(DAY) / 2
    busy = (hour >= 8) & (hour < 20)
    inside = (future >= res.lower) & (future <= res.upper)
    for part in (busy, ~busy):
        assert 0.74 <= inside[:, part].mean() <= 0.88
    under = (future <= res.upper).mean()
    assert 0.85 <= under <= 0.95
    width = (res.upper - res.lower).mean(axis=0)
    assert width[busy].mean() > 4 * width[~busy].mean()


def test_phase_scale_shrinks_thin_slices_towards_the_overall_error():
    res = np.ones((1, 1, 24))
    res[0, 0, 5] = 100.0  # one huge residual alone in its slice
    valid = np.ones(res.shape, dtype=bool)
    s = bands.phase_scale(res, valid, np.arange(24)[None, :], 24)
    overall = res.mean()
    # (one residual + SCALE_PRIOR pseudo-residuals at the overall mean) / (1 + MIN_SAMPLES)
    prior = bands.SCALE_PRIOR
    assert s[0, 5] == pytest.approx((100 + prior * overall) / (1 + prior))
    assert np.all(s[0] >= bands.SCALE_FLOOR * overall)


def test_holdout_scores_each_origin_with_bands_from_the_others():
    n, k, h = 50, 6, DAY
    noise = RNG.normal(0, 1, size=(n, k, h))
    bt = evaluation.Backtest(
        origins=np.arange(k) * DAY + 10 * DAY,
        forecast=np.full((n, k, h), 10.0),
        actual=10.0 + noise,
        valid=np.ones((n, k, h), dtype=bool),
        scale=np.ones((n, k)),
        ok=np.ones(n, dtype=bool),
    )
    got = bands.holdout(bt, (0.1, 0.9), period=DAY)
    assert 0.7 <= np.mean(got["coverage"]) <= 0.85
    assert got["calibration"].shape == (2, n) and np.all(got["calibration"] >= 1.0)
    # the weighted quantile loss of a ±1.28σ band on N(0,1) noise around 10: the
    # pinball loss of a normal quantile is σ·φ(z_q) (from memory), ×2, over the mean 10
    expected = 100 * 2 * 0.1755 / 10
    assert np.mean(got["wql"]) == pytest.approx(expected, rel=0.2)
