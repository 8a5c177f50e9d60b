"""MASE, sMAPE, coverage and rolling-origin evaluation."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.tools.eval_measures import meanabs

from floorcast.core.forecasting.base import ForecastError
from floorcast.core.forecasting.evaluation import (
    coverage,
    mae,
    mase,
    mase_scale,
    origins,
    rolling_origin,
    smape,
)

INSAMPLE = np.array([[1.0, 3.0, 2.0, 6.0, 4.0, 5.0]])
ACTUAL = np.array([[6.0, 4.0, 8.0]])
FORECAST = np.array([[4.0, 5.0, 8.0]])


def mase_reference(y_train, y_true, y_pred, m):
    """Hyndman & Koehler (2006), IJF 22(4), the scaled error (formula from memory, in
    its seasonal form): q_t = e_t / ((1/(n−m)) Σ_{i=m+1..n} |Y_i − Y_{i−m}|), MASE =
    mean |q_t|. Written as loops, independent of the vectorized module."""
    n = len(y_train)
    scale = sum(abs(y_train[i] - y_train[i - m]) for i in range(m, n)) / (n - m)
    return sum(abs(a - f) / scale for a, f in zip(y_true, y_pred, strict=True)) / len(y_true)


def smape_reference(y_true, y_pred):
    """sMAPE, the 0–200 % form (Makridakis 1993; as listed in Hyndman & Koehler 2006,
    from memory): mean of 200·|Y − F| / (|Y| + |F|), with 0/0 taken as 0."""
    terms = [
        0.0 if a == f == 0 else 200 * abs(a - f) / (abs(a) + abs(f))
        for a, f in zip(y_true, y_pred, strict=True)
    ]
    return sum(terms) / len(terms)


def test_mase_hand_computed():
    # Seasonal lag 2: |2−1|, |6−3|, |4−2|, |5−6| = 1, 3, 2, 1 -> scale 7/4.
    # Errors 2, 1, 0 -> MAE 1 -> MASE 1 / 1.75 = 4/7.
    assert mase_scale(INSAMPLE, 2)[0] == pytest.approx(1.75)
    assert mase(ACTUAL, FORECAST, INSAMPLE, 2)[0] == pytest.approx(4 / 7)
    # No season (lag 1): |2|, |−1|, |4|, |−2|, |1| -> scale 2 -> MASE 0.5.
    assert mase(ACTUAL, FORECAST, INSAMPLE, 0)[0] == pytest.approx(0.5)


def test_smape_hand_computed():
    # 2·2/10 = 0.4, 2·1/9 = 0.2222…, 0 -> mean 0.2074… -> 20.74 %.
    assert smape(ACTUAL, FORECAST)[0] == pytest.approx(100 * (0.4 + 2 / 9) / 3)
    assert smape(np.array([[0.0, 2.0]]), np.array([[0.0, 0.0]]))[0] == pytest.approx(100.0)
    assert smape(np.array([[0.0, 0.0]]), np.array([[1.0, 3.0]]))[0] == pytest.approx(200.0)
    assert smape(ACTUAL, ACTUAL)[0] == 0.0


def test_measures_match_reference_formulas_on_random_batches():
    rng = np.random.default_rng(0)
    train = rng.gamma(3, 2, size=(6, 60))
    truth = rng.gamma(3, 2, size=(6, 12))
    pred = truth + rng.normal(0, 1, size=truth.shape)
    for m in (1, 4, 12):
        got = mase(truth, pred, train, m)
        ref = [mase_reference(a, b, c, m) for a, b, c in zip(train, truth, pred, strict=True)]
        assert np.allclose(got, ref)
    assert np.allclose(
        smape(truth, pred), [smape_reference(a, b) for a, b in zip(truth, pred, strict=True)]
    )
    # MAE against statsmodels.tools.eval_measures.meanabs.
    assert np.allclose(mae(truth, pred), meanabs(truth, pred, axis=1))


def test_valid_mask_drops_points_from_every_measure():
    truth = np.array([[1.0, 2.0, 3.0, 4.0]])
    pred = np.array([[1.0, 2.0, 100.0, 4.0]])
    valid = np.array([[True, True, False, True]])
    assert mae(truth, pred, valid)[0] == 0.0
    assert smape(truth, pred, valid)[0] == 0.0
    assert coverage(truth, pred - 1, pred + 1, valid)[0] == 1.0
    assert np.isnan(mae(truth, pred, np.zeros_like(valid))[0])  # nothing to measure


def test_zero_scale_gives_zero_or_infinite_mase():
    flat = np.full((2, 10), 3.0)
    assert mase_scale(flat, 1)[0] == 0.0
    out = mase(np.full((2, 2), 3.0), np.array([[3.0, 3.0], [3.0, 4.0]]), flat, 1)
    assert out[0] == 0.0 and out[1] == np.inf


def test_coverage_counts_the_band_inclusively():
    truth = np.array([[1.0, 2.0, 3.0, 4.0, 5.0]])
    assert coverage(truth, truth - 0.5, truth + 0.5)[0] == 1.0
    assert coverage(truth, np.full_like(truth, 2.0), np.full_like(truth, 4.0))[0] == 0.6


def test_origins_step_back_from_the_end_and_respect_min_train():
    assert origins(100, 10, count=3, spacing=20, min_train=30).tolist() == [50, 70, 90]
    assert origins(100, 10, count=3, spacing=20, min_train=60).tolist() == [70, 90]
    assert origins(100, 10, count=3, spacing=20, min_train=95).tolist() == []
    with pytest.raises(ForecastError):
        origins(100, 0, spacing=1, min_train=1)


def test_rolling_origin_uses_only_data_before_each_origin():
    rng = np.random.default_rng(1)
    y = rng.gamma(2, 2, size=(4, 120))
    seen = []

    def last_value(train):
        seen.append(train.shape[1])
        return np.repeat(train[:, -1:], 10, axis=1)

    at = origins(120, 10, count=3, spacing=15, min_train=20)
    bt = rolling_origin(y, last_value, season=5, horizon=10, at=at)
    assert seen == at.tolist() == [80, 95, 110]
    for k, o in enumerate(at):
        assert np.array_equal(bt.forecast[:, k], np.repeat(y[:, o - 1 : o], 10, axis=1))
        assert np.array_equal(bt.actual[:, k], y[:, o : o + 10])
        assert np.allclose(bt.scale[:, k], mase_scale(y[:, :o], 5))
    per_origin = np.stack(
        [mase(bt.actual[:, k], bt.forecast[:, k], y[:, :o], 5) for k, o in enumerate(at)], axis=1
    )
    assert np.allclose(bt.mase(), per_origin.mean(axis=1))
    assert np.allclose(bt.residuals, bt.actual - bt.forecast)
    assert set(bt.scores()) == {"mase", "smape", "mae", "wape"}


def test_rolling_origin_marks_rows_a_method_could_not_forecast():
    y = np.abs(np.random.default_rng(2).normal(5, 1, size=(3, 50)))

    def fails_on_row_1(train):
        out = np.repeat(train[:, -1:], 5, axis=1)
        out[1] = np.nan
        return out

    bt = rolling_origin(y, fails_on_row_1, season=0, horizon=5, at=np.array([30, 45]))
    assert bt.ok.tolist() == [True, False, True]
    assert not bt.valid[1].any()
    assert np.isnan(bt.mase()[1]) and np.isfinite(bt.mase()[[0, 2]]).all()


def test_rolling_origin_scores_skip_excluded_points():
    y = np.tile(np.arange(10.0), (1, 6))  # period 10, exactly repeating
    y[0, 55] = 99.0  # a masked event in the last evaluated window
    valid = np.ones(y.shape, dtype=bool)
    valid[0, 55] = False

    def snaive(train):
        return train[:, -10:]

    bt = rolling_origin(y, snaive, season=10, horizon=10, at=np.array([50]), valid=valid)
    assert bt.mae()[0] == 0.0 and not bt.valid[0, 0, 5]
    with pytest.raises(ForecastError, match="do not fit"):
        rolling_origin(y, snaive, season=10, horizon=10, at=np.array([55]))
