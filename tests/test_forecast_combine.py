"""``combination``: members chosen leave-one-origin-out, and the engine's use of it."""

from __future__ import annotations

import numpy as np

from floorcast.core import forecasting
from floorcast.core.forecasting import combine
from floorcast.core.forecasting.engine import Options, forecast_batch
from floorcast.core.forecasting.evaluation import Backtest

RNG = np.random.default_rng(5)
DAY = 24


def backtest(forecast: np.ndarray, actual: np.ndarray) -> Backtest:
    n, k, _ = forecast.shape
    return Backtest(
        origins=np.arange(k) * DAY + 5 * DAY,
        forecast=forecast,
        actual=actual,
        valid=np.ones(forecast.shape, dtype=bool),
        scale=np.ones((n, k)),
        ok=np.ones(n, dtype=bool),
    )


def test_members_for_an_origin_are_chosen_on_the_other_origins():
    n, k, m = 4, 5, 5
    actual = RNG.uniform(5, 15, size=(n, k, DAY))
    errors = RNG.uniform(0.1, 3, size=(m, n, k, 1))  # each method's error per origin
    fcs = actual[None] + errors * RNG.choice([-1, 1], size=(m, n, k, DAY))
    names = [f"m{i}" for i in range(m)]
    bts = {nm: backtest(fcs[i], actual) for i, nm in enumerate(names)}
    got = combine.backtest(bts, names)
    # Reference: a plain loop — for origin j rank the methods by WAPE over the other
    # origins, average the best three's forecasts at origin j.
    for r in range(n):
        for j in range(k):
            others = [o for o in range(k) if o != j]
            loo = [
                np.abs(actual[r, others] - fcs[i, r, others]).sum() / actual[r, others].sum()
                for i in range(m)
            ]
            best = np.argsort(loo, kind="stable")[:3]
            assert np.allclose(got.forecast[r, j], fcs[best, r, j].mean(axis=0))
    assert got.ok.all()


def test_a_combination_needs_two_usable_members():
    actual = np.ones((1, 3, DAY))
    ok_fc = backtest(np.ones((1, 3, DAY)), actual)
    failed = Backtest(**{**ok_fc.__dict__, "ok": np.zeros(1, dtype=bool)})
    assert not combine.backtest({"a": ok_fc, "b": failed, "c": failed}, "abc").ok[0]
    w = combine.weights(np.array([[1.0, np.inf, np.nan]]))
    assert w.sum() == 0  # one finite candidate is no combination


def weekly_load(weeks: int, n: int) -> np.ndarray:
    t = np.arange(weeks * 7 * DAY)
    shape = 100 + 60 * np.sin(2 * np.pi * t / DAY) ** 2 + 30 * (t % (7 * DAY) < 5 * DAY)
    return shape * RNG.lognormal(0, 0.08, size=(n, len(t)))


def test_method_combination_averages_its_members_forecasts():
    y = weekly_load(5, 3)
    opts = Options(clip=False)
    cheap = ["seasonal-naive", "seasonal-mean", "seasonal-median", "seasonal-trimmed"]
    res = forecast_batch(y, step="1h", horizon=DAY, season=7 * DAY, method="combination",
                         candidates=cheap, options=opts)  # fmt: skip
    for i in range(3):
        members = res.meta[i]["combination"]
        assert res.method[i] == "combination" and len(members) == combine.PARTS
        assert res.meta[i]["selection"] == "fixed"
        ref = np.mean(
            [forecasting.method(m)(y[i : i + 1], season=7 * DAY, horizon=DAY)[0] for m in members],
            axis=0,
        )
        assert np.allclose(res.point[i], np.maximum(ref, 0))
        assert "combination" in res.scores[i] and res.scores[i]["combination"]["wape"] > 0


def test_auto_is_not_beaten_by_one_week_seasonal_naive_on_a_stable_week():
    # A stable weekly shape with multiplicative noise: averaging weeks beats
    # repeating one (the noise of one week is copied forward), and auto's choice
    # must not be worse than one-week seasonal naive on the held-out day.
    y = weekly_load(6, 10)
    hist, future = y[:, :-DAY], y[:, -DAY:]
    res = forecast_batch(hist, step="1h", horizon=DAY, season=7 * DAY)
    naive = hist[:, -7 * DAY : -6 * DAY]
    err_auto = np.abs(future - res.point).sum()
    err_naive = np.abs(future - naive).sum()
    assert err_auto < 0.9 * err_naive
    assert set(res.method) - {"seasonal-naive"}  # something better was found
