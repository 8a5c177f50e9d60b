"""The engine end to end, with model choice (select) and prediction bands (bands).

Most tests swap the registry for small stand-in methods so they pin down the engine's
own behaviour; a few run the real registered methods through it.
"""

from __future__ import annotations

import json
import sys

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import isotonic_regression

from floorcast.core import forecasting
from floorcast.core.forecasting import bands, engine
from floorcast.core.forecasting.base import ForecastError, as_batch, require_length
from floorcast.core.forecasting.engine import Options, forecast_batch, forecast_series
from floorcast.core.forecasting.select import call_rows
from floorcast.core.series import Series
from floorcast.core.series_text import parse_forecast, to_json_text

DAY = 288
STEP = pd.Timedelta("5min")
T0 = pd.Timestamp("2026-06-01T00:00:00Z")
RNG = np.random.default_rng(2026)


# --- stand-in methods (the contract of base.py, nothing more) ----------------------


def snaive(y, *, season, horizon):
    a = as_batch(y)
    s = season or 1
    require_length(a, s, "stand-in seasonal naive")
    return a[:, a.shape[1] - s + np.arange(horizon) % s]


def flat_mean(y, *, season, horizon):
    a = as_batch(y)
    return np.repeat(a[:, -DAY:].mean(axis=1, keepdims=True), horizon, axis=1)


def last_value(y, *, season, horizon):
    a = as_batch(y)
    return np.repeat(a[:, -1:], horizon, axis=1)


def picky(y, *, season, horizon):
    a = as_batch(y)
    if (a.max(axis=1) > 1000).any():
        raise ForecastError("stand-in refuses loads over 1000")
    return snaive(a, season=season, horizon=horizon)


def negative(y, *, season, horizon):
    return snaive(y, season=season, horizon=horizon) - 100.0


STANDINS = {
    "seasonal-naive": snaive,
    "mean": flat_mean,
    "naive": last_value,
    "picky": picky,
    "negative": negative,
}


@pytest.fixture
def registry(monkeypatch):
    """Route ``forecasting.method`` (the engine's only way to methods) to stand-ins."""
    calls: list[tuple[str, int]] = []

    def lookup(name):
        if name not in STANDINS:
            raise ForecastError(f"unknown forecasting method {name!r}")
        fn = STANDINS[name]

        def counted(y, **kw):
            calls.append((name, np.shape(y)[0]))
            return fn(y, **kw)

        return counted

    monkeypatch.setattr(forecasting, "method", lookup)
    monkeypatch.setattr(forecasting, "METHODS", {"seasonal-naive": "", "mean": ""})
    return calls


def daily(days, n=1, noise=0.3, amp=5.0, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(days * DAY)
    return 10 + amp * np.sin(2 * np.pi * t / DAY) + rng.normal(0, noise, size=(n, len(t)))


# --- bands ----------------------------------------------------------------------------


def test_band_offsets_are_monotone_and_straddle_zero():
    rng = np.random.default_rng(1)
    h = 60
    # residual spread that shrinks with the horizon: sampling noise, not information
    res = rng.normal(0, 1, size=(5, 3, h)) * np.linspace(3, 1, h)
    lo, hi, ok = bands.residual_quantiles(res, np.ones(res.shape, bool), (0.1, 0.9))
    assert ok.all()
    assert np.all(np.diff(hi, axis=1) >= 0) and np.all(np.diff(lo, axis=1) <= 0)
    assert np.all(lo <= 0) and np.all(hi >= 0)


def test_band_offsets_are_block_quantiles_made_monotone():
    rng = np.random.default_rng(2)
    res = rng.normal(0, 1, size=(2, 3, 30)) * np.linspace(1, 2, 30)
    lo, hi, _ = bands.residual_quantiles(res, np.ones(res.shape, bool), (0.2, 0.8), pool=6)
    # Reference: numpy.quantile (method="weibull") per block of 6 steps, made monotone by
    # scipy.optimize.isotonic_regression (weights = block sizes), read at block centres.
    raw = np.array(
        [np.quantile(res[0, :, b * 6 : b * 6 + 6], [0.2, 0.8], method="weibull") for b in range(5)]
    )
    ref_hi = isotonic_regression(np.maximum(raw[:, 1], 0), weights=np.full(5, 18.0)).x
    ref_lo = -isotonic_regression(-np.minimum(raw[:, 0], 0), weights=np.full(5, 18.0)).x
    centres = np.arange(5) * 6 + 2.5
    assert np.allclose(np.interp(np.arange(30), centres, ref_hi), hi[0])
    assert np.allclose(np.interp(np.arange(30), centres, ref_lo), lo[0])


def test_isotonic_fit_matches_scipy():
    rng = np.random.default_rng(3)
    y, w = rng.normal(size=(20, 15)), rng.uniform(0.1, 5, size=(20, 15))
    ours = bands.isotonic_increasing(y, w)
    # Reference: scipy.optimize.isotonic_regression (pool-adjacent-violators).
    ref = np.stack([isotonic_regression(a, weights=b).x for a, b in zip(y, w, strict=True)])
    assert np.allclose(ours, ref)


def test_too_few_residuals_are_not_trusted():
    res = np.zeros((1, 1, 5))
    lo, hi, ok = bands.residual_quantiles(res, np.ones(res.shape, bool))
    assert not ok[0] and np.all(lo == 0) and np.all(hi == 0)


def test_apply_offsets_clips_at_zero_and_orders():
    p, lo, hi = bands.apply_offsets(
        np.array([[-1.0, 0.5, 3.0]]), np.array([[-1.0]] * 1)[:, 0], np.array([2.0])
    )
    assert p.tolist() == [[0.0, 0.5, 3.0]]
    assert lo.tolist() == [[0.0, 0.0, 2.0]] and hi.tolist() == [[2.0, 2.5, 5.0]]


def test_bands_widen_with_the_horizon(registry):
    # Random walks forecast by the last value: the error grows like sqrt(h).
    y = 50 + np.cumsum(RNG.normal(0, 1, size=(40, 6 * DAY)), axis=1)
    y = np.abs(y)
    res = forecast_batch(y, step=STEP, horizon=DAY, season=0, method="naive")
    width = res.upper - res.lower
    lo_off, hi_off = res.point - res.lower, res.upper - res.point
    assert np.all(np.diff(hi_off, axis=1) >= -1e-9)
    assert np.median(width[:, -1]) > 4 * np.median(width[:, 0])
    assert all(m["bands"] == "rolling-origin" for m in res.meta)
    assert lo_off.min() >= 0


def test_gaussian_noise_80_percent_bands_cover_75_to_85_percent(registry):
    # Synthetic: daily sine + N(0, 1); seasonal naive's error is ε_new − ε_old in both
    # the backtest and the future, so 10–90 % residual quantiles should cover ~80 %.
    n, days = 200, 8
    y = daily(days, n=n, noise=1.0, amp=4.0, seed=7) + 5
    hist, future = y[:, : (days - 1) * DAY], y[:, (days - 1) * DAY :]
    res = forecast_batch(hist, step=STEP, horizon=DAY, season=DAY, method="seasonal-naive")
    inside = (future >= res.lower) & (future <= res.upper)
    assert 0.75 <= inside.mean() <= 0.85
    # the held-out coverage recorded per method (bands from the other origins) agrees
    held_out = np.array([s["seasonal-naive"]["coverage"] for s in res.scores])
    assert 0.75 <= held_out.mean() <= 0.85


# --- model choice -------------------------------------------------------------------


def test_auto_picks_per_series_and_records_every_score(registry):
    periodic = daily(7, noise=0.1, seed=1)[0]
    flat = 10 + RNG.normal(0, 2.0, size=7 * DAY)  # no pattern: the mean wins
    res = forecast_batch(np.stack([periodic, flat, periodic]), step=STEP, horizon=DAY, season=DAY)
    assert res.method == ("seasonal-naive", "mean", "seasonal-naive")
    for m in res.meta:
        assert set(m["scores"]) == {"seasonal-naive", "mean"}
        # a day per origin back from the end, each with a season of training before it
        assert m["selection"] == "auto" and m["evaluation"]["origins"] == min(6, Options().origins)
    s = res.scores[1]
    assert s["mean"]["mase"] < s["seasonal-naive"]["mase"]
    # final forecasts are made once per chosen method, on the rows that chose it
    final = registry[-2:]
    assert sorted(final) == [("mean", 1), ("seasonal-naive", 2)]


def test_call_rows_isolates_the_series_a_method_rejects():
    y = np.ones((16, 50))
    y[[3, 11], 0] = 5000.0
    out, ok, why = call_rows(picky, y, season=5, horizon=4)
    assert ok.tolist() == [i not in (3, 11) for i in range(16)]
    assert np.isnan(out[[3, 11]]).all() and np.isfinite(out[ok]).all()
    assert "over 1000" in why


def test_a_failing_candidate_costs_only_its_own_series(registry):
    y = daily(7, n=3, noise=0.1)
    y[1] *= 200  # over the picky stand-in's limit
    res = forecast_batch(y, step=STEP, horizon=DAY, season=DAY, candidates=["picky", "mean"])
    assert res.method == ("picky", "mean", "picky")
    assert "picky" in res.meta[1]["failures"] and not res.meta[0]["failures"]
    with pytest.raises(ForecastError, match=r"series \[1\].*over 1000"):
        forecast_batch(y, step=STEP, horizon=DAY, season=DAY, method="picky")


# --- the engine ---------------------------------------------------------------------


def test_outputs_are_ordered_non_negative_and_finite(registry):
    y = np.abs(daily(7, n=5, noise=2.0, amp=9.0))
    res = forecast_batch(y, step=STEP, horizon=DAY, season=DAY)
    for a in (res.point, res.lower, res.upper):
        assert a.shape == (5, DAY) and np.all(np.isfinite(a)) and a.min() >= 0
    assert np.all(res.lower <= res.point) and np.all(res.point <= res.upper)
    assert res.season.tolist() == [DAY] * 5


def test_negative_forecasts_are_clipped_to_zero(registry):
    res = forecast_batch(daily(4, noise=0.1), step=STEP, horizon=12, season=DAY, method="negative")
    assert np.all(res.point == 0) and np.all(res.lower == 0)
    assert res.meta[0]["selection"] == "fixed" and res.method == ("negative",)


def test_unknown_method_and_bad_arguments_fail_early(registry):
    y = daily(3)
    with pytest.raises(ForecastError, match="unknown"):
        forecast_batch(y, step=STEP, horizon=10, season=DAY, method="crystal-ball")
    assert registry == []  # no work was done
    with pytest.raises(ForecastError, match="at least 288"):
        forecast_batch(y[:, :100], step=STEP, horizon=10, season=DAY)
    with pytest.raises(Exception, match="whole number"):
        forecast_batch(y, step=STEP, horizon="7m", season=DAY)
    with pytest.raises(Exception, match="step"):
        forecast_batch(y, horizon=10, season=DAY)


def test_durations_are_converted_to_steps(registry):
    res = forecast_batch(daily(3), step="5m", horizon="2h", season="1d", method="naive")
    assert res.point.shape == (1, 24) and res.season[0] == DAY
    assert res.meta[0]["season_duration"] == "24h"


def test_short_history_falls_back_to_in_sample_bands(registry):
    y = daily(2, n=2)[:, : DAY + 100]  # one season and a bit: no origin fits
    res = forecast_batch(y, step=STEP, horizon=DAY, season=DAY)
    assert res.method == ("seasonal-naive", "seasonal-naive")
    m = res.meta[0]
    assert m["selection"] == "fallback" and m["bands"] == "in-sample"
    assert m["evaluation"]["origins"] == 0 and m["scores"] == {}
    assert np.all(res.upper > res.point)


def test_planned_event_in_history_is_not_repeated(registry):
    y = daily(7, noise=0.1)[0]
    sale = slice(6 * DAY + 100, 6 * DAY + 160)  # five hours, on the last day
    y[sale] *= 3
    hist = Series(start=T0, step=STEP, values=y)
    window = (T0 + 6 * DAY * STEP + 100 * STEP, T0 + 6 * DAY * STEP + 160 * STEP)
    # Without outlier clipping, only the mask keeps the sale out of tomorrow.
    raw = Options(clip=False)
    kw = {"horizon": DAY, "season": DAY, "method": "seasonal-naive", "options": raw}
    plain = forecast_series(hist, **kw)
    masked = forecast_series(hist, event_windows=[window], **kw)
    assert plain.values.max() > 25  # the sale copied into tomorrow
    assert masked.values.max() < 16  # the usual daily peak of ~15
    assert masked.meta["preprocess"]["masked"] == 60
    # With the default per-phase clipping, a 3× one-off burst is also caught unmasked.
    clipped = forecast_series(hist, horizon=DAY, season=DAY, method="seasonal-naive")
    assert clipped.values.max() < 16 and clipped.meta["preprocess"]["clipped"] >= 50


def test_gap_filled_points_are_not_scored(registry):
    y = np.tile(daily(1, noise=0.0)[0], 7)  # repeats exactly: seasonal naive is perfect
    y[6 * DAY + 10] += 3.0  # a wrong "filled" value in the last evaluated day
    flags = np.zeros(len(y), dtype=bool)
    flags[6 * DAY + 10] = True
    opts = Options(clip=False)
    kw = {"horizon": DAY, "season": DAY, "method": "seasonal-naive", "options": opts}
    scored = forecast_batch(y, step=STEP, **kw).scores[0]["seasonal-naive"]
    skipped = forecast_batch(y, step=STEP, filled=flags, **kw).scores[0]["seasonal-naive"]
    assert scored["mae"] > 0 and skipped["mae"] == 0.0
    assert skipped["mase"] == 0.0


def test_forecast_series_carries_provenance_and_round_trips_as_json(registry):
    hist = Series(
        start=T0, step=STEP, values=np.abs(daily(7, noise=0.5)[0]), unit="cores", source="shop.csv"
    )
    gen = pd.Timestamp("2026-06-08T00:01:00Z")
    out = forecast_series(hist, horizon="1d", season="1d", generated=gen)
    assert out.start == hist.end + STEP and len(out) == DAY
    assert out.generated == gen and out.unit == "cores"
    for key in ("method", "season", "scores", "quantiles", "selection", "bands"):
        assert key in out.meta
    assert out.meta["quantiles"] == [0.1, 0.9]
    text = to_json_text(out)
    json.loads(text)  # strict JSON: no Infinity/NaN slipped into meta
    back = parse_forecast(text, source="fc.json")
    assert np.allclose(back.values, out.values) and back.meta == json.loads(text)["meta"]


def test_series_of_different_lengths_are_grouped(registry):
    a = Series(start=T0, step=STEP, values=np.abs(daily(5, noise=0.2)[0]))
    b = Series(start=T0 + STEP * 7, step=STEP, values=np.abs(daily(6, noise=0.2)[0]))
    res = forecast_batch([a, b], horizon=24, season=DAY, method="seasonal-naive")
    assert res.series(0).start == a.end + STEP and res.series(1).start == b.end + STEP
    assert res.meta[0]["evaluation"]["origins"] == min(4, Options().origins)  # 5 days of history


def test_season_auto_uses_period_detection_or_says_why_not(monkeypatch, registry):
    y = daily(8, n=2, noise=0.3)
    res = forecast_batch(y, step=STEP, horizon=12, season="auto", method="naive")
    assert res.season.tolist() == [DAY, DAY]  # core/forecasting/periods.py found the day
    monkeypatch.delattr(forecasting, "periods", raising=False)
    monkeypatch.setitem(sys.modules, "floorcast.core.forecasting.periods", None)
    with pytest.raises(ForecastError, match="season explicitly"):
        engine.forecast_batch(y, step=STEP, horizon=12, season="auto", method="naive")


def test_real_registry_methods_run_through_the_engine():
    y = np.abs(daily(8, n=4, noise=0.5))
    res = forecast_batch(y, step=STEP, horizon=DAY, season=DAY, method="seasonal-naive")
    assert res.method == ("seasonal-naive",) * 4
    assert np.all(res.lower <= res.point) and np.all(res.point <= res.upper)
