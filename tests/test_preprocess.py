"""Robust preprocessing: MAD clipping, event masking, gap flags and clear errors."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from floorcast.core.forecasting.base import ForecastError
from floorcast.core.forecasting.preprocess import (
    MAD_SCALE,
    clip_outliers,
    event_mask,
    fill_masked,
    nan_quantiles,
    prepare,
    robust_scale,
    rolling_median,
)
from floorcast.errors import InputError

DAY = 288  # 5-minute steps
T0 = pd.Timestamp("2026-03-02T00:00:00Z")
STEP = pd.Timedelta("5min")


def daily(days: int = 7, n: int = 1, noise: float = 0.2, seed: int = 0) -> np.ndarray:
    """Synthetic load: a daily sine around 10 plus Gaussian noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(days * DAY)
    return 10 + 5 * np.sin(2 * np.pi * t / DAY) + rng.normal(0, noise, size=(n, len(t)))


# --- robust statistics -------------------------------------------------------------


def test_mad_scale_is_the_normal_consistency_constant():
    # 1 / Φ⁻¹(3/4) (Rousseeuw & Croux 1993); scipy.stats.norm.ppf is the reference.
    assert abs(MAD_SCALE - 1 / stats.norm.ppf(0.75)) < 5e-5


def test_robust_scale_matches_scipy_with_and_without_a_mask():
    rng = np.random.default_rng(1)
    a = rng.normal(3, 2, size=(6, 301))
    valid = rng.random(a.shape) > 0.3
    # Reference: scipy.stats.median_abs_deviation(scale="normal") (= MAD / Φ⁻¹(3/4)).
    ref = stats.median_abs_deviation(a, axis=1, scale="normal")
    assert np.allclose(robust_scale(a), ref, rtol=1e-4)
    masked_ref = [
        stats.median_abs_deviation(r[v], scale="normal") for r, v in zip(a, valid, strict=True)
    ]
    assert np.allclose(robust_scale(a, valid), masked_ref, rtol=1e-4)


def test_nan_quantiles_match_numpy():
    rng = np.random.default_rng(2)
    a = rng.normal(size=(7, 5, 40))
    a[rng.random(a.shape) < 0.2] = np.nan
    got, count = nan_quantiles(a, (0.1, 0.5, 0.9))
    # numpy.nanquantile, default linear method, is the reference.
    ref = np.moveaxis(np.nanquantile(a, [0.1, 0.5, 0.9], axis=-1), 0, -1)
    assert np.allclose(got, ref)
    assert np.array_equal(count, np.sum(~np.isnan(a), axis=-1))
    weibull, _ = nan_quantiles(a, (0.1, 0.9), method="weibull")
    ref = np.moveaxis(np.nanquantile(a, [0.1, 0.9], axis=-1, method="weibull"), 0, -1)
    assert np.allclose(weibull, ref)


@pytest.mark.parametrize("t", [1, 2, 3, 6, 7, 8, 50])
@pytest.mark.parametrize("w", [1, 3, 7, 9, 17])  # 17: the np.partition path
def test_rolling_median_matches_pandas(t, w):
    # Reference: pandas DataFrame.rolling(w, center=True, min_periods=1).median().
    a = np.random.default_rng(t * w).random((3, t))
    ref = pd.DataFrame(a.T).rolling(w, center=True, min_periods=1).median().to_numpy().T
    assert np.allclose(rolling_median(a, w), ref)


@pytest.mark.parametrize("w", [7, 17])
def test_rolling_median_can_leave_each_point_out_of_its_window(w):
    a = np.random.default_rng(9).random((2, 40))
    h = w // 2
    # Reference: a direct per-point median of the neighbours (numpy.median).
    ref = [
        [np.median(np.r_[r[max(0, t - h) : t], r[t + 1 : t + h + 1]]) for t in range(40)] for r in a
    ]
    assert np.allclose(rolling_median(a, w, skip_centre=True), ref)


def test_no_false_alarms_on_clean_gaussian_noise():
    y = daily(days=14, n=40, noise=0.3, seed=11)
    _, flags = clip_outliers(y)
    assert flags.sum() == 0  # 5 robust scales ≈ 5.5 σ: ~4e-8 per point if Gaussian


# --- outlier clipping -------------------------------------------------------------


def test_isolated_spikes_are_clipped_and_the_daily_peak_is_not():
    y = daily(days=3, noise=0.2)
    spiky = y.copy()
    spiky[0, [100, 400, 401]] += 30
    out, flags = clip_outliers(spiky)
    assert flags[0, [100, 400, 401]].all()
    assert flags.sum() == 3
    assert np.all(np.abs(out[0, [100, 400, 401]] - y[0, [100, 400, 401]]) < 2.0)
    untouched = ~flags[0]
    assert np.array_equal(out[0, untouched], spiky[0, untouched])
    assert out[0].max() == pytest.approx(spiky[0, untouched].max())  # peaks kept


def test_clipped_points_sit_on_the_band_edge():
    y = daily(days=2, noise=0.2)
    y[0, 50] += 100
    out, _ = clip_outliers(y, k=5.0)
    base = rolling_median(y, 7, skip_centre=True)
    scale = robust_scale(y - base)
    assert out[0, 50] == pytest.approx(base[0, 50] + 5.0 * scale[0])


def test_zero_mad_rows_are_left_alone():
    y = np.zeros((1, 500))
    y[0, ::50] = 8.0  # a sparse batch job: most of the time nothing
    out, flags = clip_outliers(y)
    assert not flags.any() and np.array_equal(out, y)


def test_phase_baseline_catches_a_burst_too_long_for_the_rolling_window():
    y = daily(days=5, noise=0.2)
    y[0, 2 * DAY + 100 : 2 * DAY + 110] += 20  # 50 minutes of extra load
    _, rolling = clip_outliers(y, how="rolling")
    out, phase = clip_outliers(y, how="phase", season=DAY)
    assert rolling[0, 2 * DAY + 103 : 2 * DAY + 107].sum() == 0  # median follows a burst
    assert phase[0, 2 * DAY + 100 : 2 * DAY + 110].all()
    assert out[0, 2 * DAY + 105] < y[0, 2 * DAY + 105] - 15


def test_noise_free_series_keeps_its_small_wiggles_but_not_a_real_spike():
    y = np.tile(2 + np.sin(np.arange(DAY) / DAY * 6.28), 3)[None, :]  # tiny seam each day
    assert not clip_outliers(y)[1].any()  # the 1 %-of-level scale floor
    y[0, 400] += 1.0  # half the level: an outlier however smooth the rest is
    assert clip_outliers(y)[1][0].tolist().count(True) == 1 and clip_outliers(y)[1][0, 400]


@pytest.mark.parametrize("kw", [{"k": 0}, {"window": 4}, {"how": "mean"}])
def test_clip_parameter_errors(kw):
    with pytest.raises(InputError):
        clip_outliers(np.ones((1, 20)), **kw)


# --- event windows ------------------------------------------------------------------


def test_event_mask_from_index_ranges_and_instants_is_half_open():
    m = event_mask(20, [(2, 5), (18, 30), (-3, 1)])
    assert np.flatnonzero(m).tolist() == [0, 2, 3, 4, 18, 19]
    window = (T0 + 3 * STEP, T0 + 6 * STEP)  # 00:15 .. 00:30, the 00:30 sample is free
    m = event_mask(10, [window], start=T0, step=STEP)
    assert np.flatnonzero(m).tolist() == [3, 4, 5]
    between = (T0 + 2.5 * STEP, T0 + 4 * STEP)  # starts between samples
    assert np.flatnonzero(event_mask(10, [between], start=T0, step=STEP)).tolist() == [3]


@pytest.mark.parametrize(
    "windows, kw, word",
    [
        ([(5, 2)], {}, "ends before"),
        ([(T0, T0 + STEP)], {}, "start and step"),
        (
            [(pd.Timestamp("2026-03-02"), pd.Timestamp("2026-03-03"))],
            {"start": T0, "step": STEP},
            "naive",
        ),
        ([(1, 2, 3)], {}, "pair"),
    ],
)
def test_event_mask_errors(windows, kw, word):
    with pytest.raises(InputError, match=word):
        event_mask(10, windows, **kw)


def test_masked_sale_is_replaced_by_neighbouring_days():
    clean = daily(days=7, noise=0.0)
    sale = clean.copy()
    sale[0, 3 * DAY + 120 : 3 * DAY + 180] *= 4  # a five-hour sale on day 3
    mask = event_mask(sale.shape[1], [(3 * DAY + 120, 3 * DAY + 180)])
    out = fill_masked(sale, mask, season=DAY)
    assert np.allclose(out, clean)  # exact: the neighbouring days hold the pattern


def test_masking_searches_further_seasons_and_falls_back_to_interpolation():
    clean = daily(days=6, noise=0.0)
    mask = np.zeros(clean.shape[1], dtype=bool)
    mask[DAY + 10 : 3 * DAY + 20] = True  # longer than a season
    out = fill_masked(clean * np.where(mask, 3, 1), mask, season=DAY)
    assert np.allclose(out, clean)
    lin = fill_masked(np.array([[1.0, 9.0, 9.0, 4.0]]), np.array([False, True, True, False]))
    assert np.allclose(lin, [[1.0, 2.0, 3.0, 4.0]])  # no season: straight line


# --- prepare ---------------------------------------------------------------------------


def test_prepare_flags_each_kind_and_excludes_masked_and_filled():
    y = daily(days=4, noise=0.2)
    y[0, 500] += 40
    filled = np.zeros(y.shape[1], dtype=bool)
    filled[700:704] = True
    masked = event_mask(y.shape[1], [(300, 320)])
    p = prepare(y, season=DAY, filled=filled, masked=masked)
    assert p.clipped[0, 500] and p.clipped.sum() == 1
    assert np.array_equal(p.masked[0], masked) and np.array_equal(p.filled[0], filled)
    assert np.array_equal(p.excluded[0], masked | filled)
    assert np.all(np.isfinite(p.values))


def test_prepare_errors_are_clear():
    with pytest.raises(ForecastError, match="at least 288"):
        prepare(np.ones((1, 100)), season=DAY, min_length=DAY)
    with pytest.raises(ForecastError, match=r"series \[1\]: every point is masked"):
        prepare(np.ones((2, 10)), masked=np.array([[False] * 10, [True] * 10]))
    few = np.ones(DAY * 2, dtype=bool)
    few[:100] = False
    with pytest.raises(ForecastError, match="only 100 real observations"):
        prepare(np.ones((1, DAY * 2)), season=DAY, filled=few)
    with pytest.raises(ForecastError, match="NaN"):
        prepare(np.array([[1.0, np.nan, 2.0]]))


@settings(max_examples=60, deadline=None)
@given(
    data=st.lists(st.floats(0, 1e6), min_size=8, max_size=80),
    mask_bits=st.lists(st.booleans(), min_size=8, max_size=80),
    season=st.sampled_from([0, 2, 3, 5]),
)
def test_prepare_never_returns_nan(data, mask_bits, season):
    y = np.array(data)[None, :]
    m = np.resize(np.array(mask_bits), y.shape[1])
    try:
        p = prepare(y, season=season, masked=m)
    except ForecastError:
        assert (~m).sum() < max(2, season)  # only when too little is left
        return
    assert np.all(np.isfinite(p.values))
    assert p.values.min() >= y.min() - 1e-9 and p.values.max() <= y.max() + 1e-9
