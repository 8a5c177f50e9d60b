"""Holt-Winters: recursions and forecasts against statsmodels, fitting quality, Taylor's
double-seasonal model, input errors, and never-NaN properties.

statsmodels' ``ExponentialSmoothing`` is the reference, not the engine: every value
compared here comes from it (or, for the double-seasonal model, from Taylor's own
equations written out below).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.tsa.holtwinters import ExponentialSmoothing

from floorcast.core import forecasting
from floorcast.core.forecasting import holt_winters as hw
from floorcast.core.forecasting.base import ForecastError

REL = 1e-6  # the required agreement; observed differences are ~1e-15

VARIANTS = [  # (trend, damped, seasonal)
    ("add", True, "add"),
    ("add", False, "add"),
    (None, False, "add"),
    ("add", True, "mul"),
    ("add", False, "mul"),
    (None, False, "mul"),
]
FIXED = {"smoothing_level": 0.3, "smoothing_trend": 0.1, "smoothing_seasonal": 0.2}


def signal(t_len: int, m: int, seed: int = 0, noise: float = 0.5) -> np.ndarray:
    """Synthetic positive load: a daily bump, slow drift, noise (test signal only)."""
    rng = np.random.default_rng(seed)
    t = np.arange(t_len)
    ph = (t % m) / m if m else t / max(t_len, 1)
    day = 3 * np.sin(2 * np.pi * ph) + 2 * np.exp(-0.5 * ((ph - 0.7) / 0.06) ** 2)
    return (
        20
        + day
        + 0.01 * t / max(m, 1)
        + np.cumsum(rng.normal(0, 0.05, t_len))
        + rng.normal(0, noise, t_len)
    )


def sm_fit(y, m, trend, damped, seasonal, init="known", states=None, **params):
    kw = {"initialization_method": init}
    if init == "known":
        kw.update(states)
    mod = ExponentialSmoothing(
        y,
        trend=trend,
        damped_trend=damped,
        seasonal=seasonal if m else None,
        seasonal_periods=m or None,
        **kw,
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return mod.fit(**params)


def known_states(m, trend, seasonal, level=20.0):
    prof = 3 * np.sin(2 * np.pi * np.arange(m) / m)
    out = {"initial_level": level}
    if trend:
        out["initial_trend"] = 0.02
    if m:
        out["initial_seasonal"] = prof if seasonal == "add" else 1 + prof / level
    return out


def model_params(trend, damped, m):
    p = {"smoothing_level": FIXED["smoothing_level"]}
    if trend:
        p["smoothing_trend"] = FIXED["smoothing_trend"]
    if damped:
        p["damping_trend"] = 0.9
    if m:
        p["smoothing_seasonal"] = FIXED["smoothing_seasonal"]
    return p


def expected_forecast(ref, horizon, m, damped, trend, seasonal, phi=0.9):
    """statsmodels' forecast, except at horizons that are multiples of m: statsmodels
    0.15 uses the seasonal state from one season too early there (statsmodels issue
    #9538, fixed by PR #10230), so those come from its own final states with the
    textbook formula (Hyndman & Athanasopoulos, FPP 2nd ed. §7.3)."""
    exp = np.asarray(ref.forecast(horizon), dtype=float)
    if not m:
        return exp
    h = np.arange(1, horizon + 1)
    damp = np.cumsum(phi**h) if damped else h.astype(float)
    base = ref.level[-1] + (damp * ref.trend[-1] if trend else np.zeros(horizon))
    at = h % m == 0
    last = ref.season[-1]
    exp[at] = (base * last if seasonal == "mul" else base + last)[at]
    return exp


@pytest.mark.parametrize(("trend", "damped", "seasonal"), VARIANTS)
@pytest.mark.parametrize(("m", "t_len"), [(12, 100), (7, 61), (288, 4032)])
def test_fitted_and_forecast_match_statsmodels(trend, damped, seasonal, m, t_len):
    y = signal(t_len, m, seed=m)
    states = known_states(m, trend, seasonal)
    prm = model_params(trend, damped, m)
    ref = sm_fit(y, m, trend, damped, seasonal, states=states, optimized=False, **prm)
    ours = hw.fit(
        y, season=m, trend=trend, damped=damped, seasonal=seasonal, init="known", **states, **prm
    )
    np.testing.assert_allclose(ours.fitted[0], ref.fittedvalues, rtol=REL)  # statsmodels
    np.testing.assert_allclose(ours.sse[0], ref.sse, rtol=REL)
    horizon = 2 * m + 5
    exp = expected_forecast(ref, horizon, m, damped, trend, seasonal)
    np.testing.assert_allclose(ours.forecast(horizon)[0], exp, rtol=REL)


@pytest.mark.parametrize(("trend", "damped"), [("add", True), ("add", False), (None, False)])
def test_nonseasonal_matches_statsmodels(trend, damped):
    y = signal(150, 0, seed=3)
    states = known_states(0, trend, "add")
    prm = model_params(trend, damped, 0)
    ref = sm_fit(y, 0, trend, damped, None, states=states, optimized=False, **prm)
    ours = hw.fit(y, season=0, trend=trend, damped=damped, init="known", **states, **prm)
    np.testing.assert_allclose(ours.fitted[0], ref.fittedvalues, rtol=REL)  # statsmodels
    np.testing.assert_allclose(ours.forecast(20)[0], ref.forecast(20), rtol=REL)


def test_batch_with_per_series_parameters_matches_statsmodels_one_by_one():
    m, t_len = 24, 24 * 5 + 7
    ys = np.stack([signal(t_len, m, seed=s) * (1 + s) for s in range(4)])
    alphas = np.array([0.05, 0.2, 0.5, 0.9])
    betas = np.array([0.01, 0.1, 0.3, 0.0])
    gammas = np.array([0.0, 0.3, 0.1, 0.05])
    phis = np.array([0.8, 0.9, 0.95, 0.99])
    ours = hw.fit(
        ys,
        season=m,
        init="heuristic",
        smoothing_level=alphas,
        smoothing_trend=betas,
        smoothing_seasonal=gammas,
        damping_trend=phis,
    )
    for i in range(4):
        ref = sm_fit(
            ys[i],
            m,
            "add",
            True,
            "add",
            init="heuristic",
            optimized=False,
            smoothing_level=alphas[i],
            smoothing_trend=betas[i],
            smoothing_seasonal=gammas[i],
            damping_trend=phis[i],
        )
        # statsmodels' "heuristic" states (Hyndman et al. 2008 §2.6.1) and recursions
        np.testing.assert_allclose(ours.fitted[i], ref.fittedvalues, rtol=REL)
        np.testing.assert_allclose(
            ours.initial_seasonal[i], ref.params["initial_seasons"], rtol=REL, atol=1e-9
        )


@pytest.mark.parametrize("seasonal", ["add", "mul"])
def test_heuristic_initial_states_match_statsmodels(seasonal):
    m = 48
    y = signal(48 * 9 + 5, m, seed=7)
    prm = model_params("add", True, m)
    ref = sm_fit(y, m, "add", True, seasonal, init="heuristic", optimized=False, **prm)
    ours = hw.fit(y, season=m, seasonal=seasonal, init="heuristic", **prm)
    np.testing.assert_allclose(ours.initial_level[0], ref.params["initial_level"], rtol=REL)
    np.testing.assert_allclose(ours.initial_trend[0], ref.params["initial_trend"], rtol=REL)
    np.testing.assert_allclose(ours.fitted[0], ref.fittedvalues, rtol=REL)  # statsmodels


def test_estimated_states_for_fixed_parameters_are_least_squares():
    # statsmodels with fixed smoothing parameters estimates only the initial states
    # (L-BFGS-B); ours solves the same problem exactly, so it is never worse.
    m = 24
    y = signal(24 * 10, m, seed=11)
    prm = model_params("add", True, m)
    ref = sm_fit(y, m, "add", True, "add", init="estimated", **prm)
    ours = hw.fit(y, season=m, **prm)
    assert ours.sse[0] <= ref.sse * (1 + 1e-9)
    assert ours.sse[0] >= ref.sse * 0.99  # the same problem, not a different one
    again = sm_fit(
        y,
        m,
        "add",
        True,
        "add",
        states={
            "initial_level": ours.initial_level[0],
            "initial_trend": ours.initial_trend[0],
            "initial_seasonal": ours.initial_seasonal[0],
        },
        optimized=False,
        **prm,
    )
    np.testing.assert_allclose(ours.sse[0], again.sse, rtol=REL)


@pytest.mark.parametrize(
    ("m", "t_len", "seasonal", "init"),
    [
        (288, 4032, "add", "estimated"),
        (288, 4032, "add", "heuristic"),
        (48, 672, "mul", "estimated"),
    ],
)
def test_fitted_sse_within_one_percent_of_statsmodels(m, t_len, seasonal, init):
    y = signal(t_len, m, seed=5, noise=0.3)
    ref = sm_fit(y, m, "add", True, seasonal, init=init)
    ours = hw.fit(y, season=m, seasonal=seasonal, init=init)
    assert ours.sse[0] <= ref.sse * 1.01  # statsmodels ExponentialSmoothing(...).fit()
    check = sm_fit(
        y,
        m,
        "add",
        True,
        seasonal,
        states={
            "initial_level": ours.initial_level[0],
            "initial_trend": ours.initial_trend[0],
            "initial_seasonal": ours.initial_seasonal[0],
        },
        optimized=False,
        smoothing_level=ours.alpha[0],
        smoothing_trend=ours.beta[0],
        smoothing_seasonal=ours.gamma[0],
        damping_trend=ours.phi[0],
    )
    np.testing.assert_allclose(ours.sse[0], check.sse, rtol=REL)  # our SSE is real
    assert ours.beta[0] <= ours.alpha[0] and ours.gamma[0] <= 1 - ours.alpha[0]
    assert 0.8 <= ours.phi[0] <= 0.995  # statsmodels' bounds


def test_batch_fit_equals_fitting_each_series_alone():
    # Equal up to rounding: the chunk length (and so the summation order) depends on
    # the batch size, and finite-difference Jacobians amplify that to ~1e-8.
    m = 24
    ys = np.stack([signal(24 * 8, m, seed=s) for s in range(3)])
    both = hw.fit(ys, season=m)
    for i in range(3):
        alone = hw.fit(ys[i], season=m)
        np.testing.assert_allclose(both.sse[i], alone.sse[0], rtol=1e-6)  # up to rounding
        np.testing.assert_allclose(both.forecast(10)[i], alone.forecast(10)[0], rtol=1e-6)


def taylor_additive(y, m1, m2, alpha, beta, delta, omega, l0, b0, d0, w0):
    """Taylor (2003) double seasonal Holt-Winters, additive form, from the paper's
    equations (from memory): S level, T trend, D daily, W weekly."""
    s, tr, d, w = l0, b0, list(d0), list(w0)
    fit = []
    for t, x in enumerate(y):
        dd, ww = d[t], w[t]
        fit.append(s + tr + dd + ww)
        s_new = alpha * (x - dd - ww) + (1 - alpha) * (s + tr)
        tr = beta * (s_new - s) + (1 - beta) * tr
        d.append(delta * (x - s_new - ww) + (1 - delta) * dd)
        w.append(omega * (x - s_new - dd) + (1 - omega) * ww)
        s = s_new
    return np.array(fit)


def weekly_signal(m, weeks, seed, noise=0.3):
    """Daily peaks, weekends at half load (synthetic test signal)."""
    rng = np.random.default_rng(seed)
    t = np.arange(m * 7 * weeks)
    ph, day = (t % m) / m, (t // m) % 7
    daily = 4 * np.exp(-0.5 * ((ph - 0.5) / 0.12) ** 2) + 2 * np.exp(
        -0.5 * ((ph - 0.8) / 0.05) ** 2
    )
    return 3 + daily * np.where(day >= 5, 0.5, 1.0) + rng.normal(0, noise, t.size)


def test_double_seasonal_is_taylors_model():
    m1, m2 = 6, 18
    y = weekly_signal(6, 8, seed=1)[: 18 * 4 + 5]
    rng = np.random.default_rng(2)
    d0, w0 = rng.normal(0, 1, m1), rng.normal(0, 0.5, m2)
    alpha, beta, delta, omega = 0.3, 0.1, 0.4, 0.25
    ref = taylor_additive(y, m1, m2, alpha, beta, delta, omega, 3.0, 0.01, d0, w0)
    ours = hw.fit(
        y,
        season=m1,
        season2=m2,
        damped=False,
        init="known",
        initial_level=3.0,
        initial_trend=0.01,
        initial_seasonal=d0,
        initial_seasonal2=w0,
        smoothing_level=alpha,
        smoothing_trend=beta,
        smoothing_seasonal=delta * (1 - alpha),
        smoothing_seasonal2=omega * (1 - alpha),
    )
    np.testing.assert_allclose(ours.fitted[0], ref, rtol=1e-10)


def test_double_seasonal_beats_single_out_of_sample():
    m, weeks = 24, 4  # hourly, four weeks of history, one week ahead
    mse_double, mse_single = [], []
    for seed in range(3):
        y = weekly_signal(m, weeks + 1, seed)
        train, test = y[: m * 7 * weeks], y[m * 7 * weeks :]
        two = hw.forecast(train, season=m, season2=7 * m, horizon=7 * m)[0]
        one = hw.forecast(train, season=m, horizon=7 * m)[0]
        mse_double.append(np.mean((two - test) ** 2))
        mse_single.append(np.mean((one - test) ** 2))
    assert np.mean(mse_double) < 0.5 * np.mean(mse_single)
    assert np.mean(mse_double) < 2 * 0.3**2  # close to the noise floor
    same = hw.double_seasonal_forecast(train, season=m, horizon=7 * m)[0]
    np.testing.assert_allclose(same, two)


def test_registry_method_is_this_forecast():
    y = signal(24 * 6, 24, seed=4)
    fn = forecasting.method("holt-winters")
    out = fn(y[None], season=24, horizon=30)
    assert out.shape == (1, 30)
    np.testing.assert_allclose(out, hw.forecast(y, season=24, horizon=30))


def test_forecasts_are_not_clipped_at_zero():
    y = np.linspace(50.0, 1.0, 24 * 4) + np.tile(np.sin(np.linspace(0, 2 * np.pi, 24)), 4)
    out = hw.forecast(y, season=24, horizon=48)
    assert out.min() < 0  # the engine clips; this method reports what it fitted


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"season": 24, "horizon": 5, "y": np.ones(47)}, "two seasons"),
        ({"season": 0, "horizon": 5, "y": np.ones(9)}, "ten steps"),
        ({"season": 24, "season2": 168, "horizon": 5, "y": np.ones(200)}, "two seasons of 168"),
        ({"season": 24, "season2": 100, "horizon": 5, "y": np.ones(400)}, "multiple"),
        ({"season": 24, "horizon": 0, "y": np.ones(100)}, "horizon"),
        ({"season": 24, "horizon": 5, "y": np.ones(100), "trend": "mul"}, "trend"),
        ({"season": 24, "horizon": 5, "y": np.ones(100), "init": "magic"}, "init"),
        ({"season": 24, "horizon": 5, "y": np.r_[np.ones(99), np.nan]}, "NaN"),
    ],
)
def test_unusable_input_raises_forecast_error(kwargs, match):
    with pytest.raises(ForecastError, match=match):
        hw.forecast(**kwargs)


def test_multiplicative_needs_positive_data_and_names_the_rows():
    y = np.tile(signal(24 * 3, 24), (4, 1))
    y[1, 5] = 0.0
    y[3, 7] = -1.0
    with pytest.raises(ForecastError, match=r"\[1, 3\]"):
        hw.forecast(y, season=24, horizon=5, seasonal="mul")
    assert np.all(np.isfinite(hw.forecast(y, season=24, horizon=5)))  # additive copes


def test_partial_parameters_and_missing_states_are_refused():
    y = signal(100, 12)
    with pytest.raises(ForecastError, match="smoothing_seasonal"):
        hw.fit(y, season=12, smoothing_level=0.3, smoothing_trend=0.1, damping_trend=0.9)
    with pytest.raises(ForecastError, match="initial_seasonal"):
        hw.fit(y, season=12, init="known", initial_level=1.0, initial_trend=0.0)
    with pytest.raises(ForecastError, match="only used"):
        hw.fit(y, season=12, initial_level=1.0)


@pytest.mark.parametrize(
    "y", [np.zeros(96), np.full(96, 7.0), np.r_[np.zeros(60), np.full(36, 100.0)]]
)
def test_degenerate_histories_give_finite_forecasts(y):
    out = hw.forecast(y, season=24, horizon=50)
    assert out.shape == (1, 50) and np.all(np.isfinite(out))
    if np.ptp(y) == 0:
        np.testing.assert_allclose(out, y[0], atol=1e-6)  # a constant stays constant


@settings(max_examples=25, deadline=None)
@given(
    m=st.integers(2, 9),
    seasons=st.integers(2, 5),
    extra=st.integers(0, 7),
    n=st.integers(1, 3),
    seasonal=st.sampled_from(["add", "mul"]),
    damped=st.booleans(),
    seed=st.integers(0, 2**16),
)
def test_forecasts_are_always_finite(m, seasons, extra, n, seasonal, damped, seed):
    rng = np.random.default_rng(seed)
    t_len = max(m * seasons + extra, 10)
    y = rng.gamma(2.0, 5.0, (n, t_len)) + 0.1
    out = hw.forecast(y, season=m, horizon=2 * m + 1, seasonal=seasonal, damped=damped)
    assert out.shape == (n, 2 * m + 1)
    assert np.all(np.isfinite(out))
