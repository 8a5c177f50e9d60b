"""The forecaster's quantile levels (core/forecasting/band_levels.py; docs/forecasting.md,
"Quantiles"): their empirical quantiles, their order, and the way from the forecaster
through the forecast file into the planner (docs/formats.md, docs/policy.md)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from test_reconcile import policy

from floorcast import plans
from floorcast.core.forecasting import band_levels, bands, evaluation
from floorcast.core.forecasting.engine import forecast_batch
from floorcast.core.series_text import parse_forecast, to_csv_text, to_json_text
from floorcast.errors import InputError

RNG = np.random.default_rng(5)
LEVELS = (0.1, 0.5, 0.8, 0.9, 0.95, 0.99)
START = pd.Timestamp("2026-03-02T00:00:00Z")


def _backtest(n: int = 3, k: int = 4, h: int = 12) -> evaluation.Backtest:
    # Skewed residuals with a bias, so the signed and the absolute edges differ.
    actual = RNG.gamma(2.0, 1.0, size=(n, k, h)) + 5.0
    forecast = np.full((n, k, h), 6.5)
    return evaluation.Backtest(
        origins=np.arange(k) * h, forecast=forecast, actual=actual,
        valid=np.ones((n, k, h), dtype=bool), scale=np.ones((n, k)), ok=np.ones(n, dtype=bool),
    )  # fmt: skip


def test_level_offsets_are_numpy_quantiles_of_the_residuals():
    bt = _backtest()
    h = bt.forecast.shape[2]
    stretch = np.array([[1.2, 1.0, 1.4], [1.5, 1.1, 2.0]])  # (lower, upper) × series
    off, ok = band_levels.level_offsets(
        {"m": bt}, ["m"] * 3, h, LEVELS, pool=h, period=0, calibration={"m": stretch}
    )
    assert ok.all() and off.shape == (3, len(LEVELS), h)
    r = bt.residuals.reshape(3, -1)
    for i in range(3):
        for j, q in enumerate(LEVELS):
            # Reference: numpy.quantile, method "weibull" (Hyndman & Fan type 6, what the
            # band uses), of the absolute residuals mirrored about 0 and of the signed
            # ones; the band's edge is the wider of the two, then the held-out stretch.
            sym = np.quantile(np.concatenate([r[i], -r[i]]), q, method="weibull")
            signed = np.quantile(r[i], q, method="weibull")
            if q >= 0.5:
                want = max(sym, signed, 0.0) * stretch[1, i]
            else:
                want = min(sym, signed, 0.0) * stretch[0, i]
            # One block over the whole horizon: the same offset at every step.
            assert off[i, j] == pytest.approx(np.full(h, want), rel=1e-12, abs=1e-12)


def test_the_bands_upper_level_is_the_upper_band():
    bt = _backtest()
    h = bt.forecast.shape[2]
    _, hi, _ = bands.from_backtests({"m": bt}, ["m"] * 3, h, (0.1, 0.9), pool=4)
    off, _ = band_levels.level_offsets({"m": bt}, ["m"] * 3, h, (0.9,), pool=4)
    assert np.array_equal(off[:, 0], hi)


def _history(days: float = 21, per_day: int = 48) -> np.ndarray:
    t = np.arange(int(days * per_day))
    shape = 1.0 + np.sin(2 * np.pi * t / per_day) ** 2 * 8
    # Noise that is large against the night's load, so a lower quantile hits 0.
    return np.stack([shape + RNG.normal(0, s, t.size) for s in (0.2, 1.0, 3.0)])


@pytest.mark.parametrize("days", [21, 1.5])  # rolling-origin residuals; in-sample fallback
def test_forecast_levels_are_monotone_non_negative_and_hold_the_band(days):
    y = np.maximum(_history(days), 0.0)
    bf = forecast_batch(y, horizon=96, step="30m", season="1d", levels=LEVELS, start=START)
    assert bf.levels == LEVELS and bf.qvalues.shape == (3, len(LEVELS), 96)
    q = bf.qvalues
    assert (q >= 0).all()
    assert (np.diff(q, axis=1) >= 0).all()
    assert (q[:, 0] <= bf.point).all() and (q[:, 1:] >= bf.point[:, None]).all()
    # The band's own upper level (0.9) is the upper band, from the same residuals.
    assert np.array_equal(q[:, LEVELS.index(0.9)], bf.upper)
    assert bf.meta[0]["levels"] == list(LEVELS)
    assert {m["bands"] for m in bf.meta} == {"rolling-origin" if days == 21 else "in-sample"}


def test_no_levels_writes_no_quantiles():
    bf = forecast_batch(_history()[:1], horizon=48, step="30m", season="1d", levels=(),
                        start=START)  # fmt: skip
    assert bf.qvalues is None and bf.series(0).quantiles is None


@pytest.mark.parametrize("bad", [(0.9, 0.5), (0.0, 0.5), (0.5, 1.0), (0.5, 0.5)])
def test_bad_levels_are_an_input_error(bad):
    with pytest.raises(InputError, match="levels"):
        forecast_batch(_history()[:1], horizon=48, step="30m", season="1d", levels=bad)


@pytest.mark.parametrize("write", [to_csv_text, to_json_text])
def test_round_trip_through_the_file_into_the_planner(write):
    bf = forecast_batch(_history()[1:2], horizon=96, step="30m", season="1d", start=START)
    s = bf.series(0)
    ext = "csv" if write is to_csv_text else "json"
    back = parse_forecast(write(s), source=f"fc.{ext}")
    assert back.levels == band_levels.DEFAULT_LEVELS
    spec = policy(serviceLevel=0.95).spec
    line = plans.planning_load(spec, back)
    assert np.allclose(line, bf.qvalues[0, band_levels.DEFAULT_LEVELS.index(0.95)],
                       rtol=1e-9, atol=1e-12)  # fmt: skip
    assert plans.planning_label(spec, back) == "q0.95"
    # Between two written levels the planner interpolates; the reference is numpy.interp.
    mid = plans.planning_load(replace(spec, service_level=0.97), back)
    ref = [np.interp(0.97, back.levels, back.quantiles[:, i]) for i in range(len(back))]
    assert np.allclose(mid, ref)
    # Without serviceLevel the same file plans on the upper band, as before.
    assert np.array_equal(plans.planning_load(replace(spec, service_level=None), back),
                          back.upper)  # fmt: skip
