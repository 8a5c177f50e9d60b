"""Accuracy measures and rolling-origin evaluation, for choosing methods and sizing bands.

MASE (Hyndman & Koehler 2006, "Another look at measures of forecast accuracy",
International Journal of Forecasting 22(4), 679-688) divides the forecast's mean
absolute error by the in-sample mean absolute error of the seasonal naive forecast,
``mean |y_t − y_{t−m}|`` over the training data (m = season, or 1 without one). It is
scale-free, so one threshold means the same for a 0.2-core and a 200-core workload,
and below 1 means "better than repeating last season".

sMAPE is the 0–200 % variant (Makridakis 1993; as written in Hyndman & Koehler 2006):
``100 · mean(2·|y − f| / (|y| + |f|))``, with a 0/0 term (both zero) counted as 0.

WAPE (weighted absolute percentage error) is ``100 · Σ|y − f| / Σ|y|``: the error
as a share of the load actually served, so a series' busy hours weigh as much as they
cost, and a night of near-zero load does not explode it as MAPE would. The weighted
quantile loss is the same idea for a band edge: ``100 · 2 Σ ρ_q(y − b_q) / Σ|y|``
with the pinball loss ρ_q(u) = max(q·u, (q − 1)·u) (Koenker & Bassett 1978; the
"weighted quantile loss" of the M5 and GluonTS evaluations, normalised so that at
q = 0.5 it equals WAPE — cited from memory).

Every measure reduces over all axes but the first, so it works on one forecast per
series (N, H) or on many origins (N, K, H), and takes a ``valid`` mask of points to
score (masked events and gap-filled points are not observations). A series with no
valid point gets NaN: "not measured", which selection treats as worst.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from floorcast.core.forecasting.base import ForecastError

MethodCall = Callable[[np.ndarray], np.ndarray]


def season_lag(season: int) -> int:
    """The naive benchmark's lag: last season's value, or the last value without a season."""
    return season if season > 0 else 1


def _flat(a: np.ndarray) -> np.ndarray:
    a = np.asarray(a, dtype=np.float64)
    return a.reshape(a.shape[0], -1)


def _mean(terms: np.ndarray, valid: np.ndarray | None) -> np.ndarray:
    t = _flat(terms)
    if valid is None:
        v = np.ones(t.shape, dtype=bool)
    else:
        v = _flat(np.broadcast_to(valid, terms.shape)) > 0
    count = v.sum(axis=1)
    total = np.where(v, t, 0.0).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)


def mae(actual: np.ndarray, forecast: np.ndarray, valid: np.ndarray | None = None) -> np.ndarray:
    return _mean(np.abs(np.asarray(actual) - np.asarray(forecast)), valid)


def smape(actual: np.ndarray, forecast: np.ndarray, valid: np.ndarray | None = None) -> np.ndarray:
    """sMAPE in percent, 0 (perfect) to 200 (one of the two is zero)."""
    y, f = np.asarray(actual, dtype=np.float64), np.asarray(forecast, dtype=np.float64)
    den = np.abs(y) + np.abs(f)
    with np.errstate(invalid="ignore", divide="ignore"):
        terms = np.where(den > 0, 2 * np.abs(y - f) / np.where(den > 0, den, 1), 0.0)
    return 100 * _mean(terms, valid)


def wape(actual: np.ndarray, forecast: np.ndarray, valid: np.ndarray | None = None) -> np.ndarray:
    """WAPE in percent; NaN where the scored load sums to zero (nothing to weigh by)."""
    y = np.asarray(actual, dtype=np.float64)
    return _share(np.abs(y - np.asarray(forecast, dtype=np.float64)), np.abs(y), valid)


def pinball(actual: np.ndarray, bound: np.ndarray, q: float) -> np.ndarray:
    """Pinball (quantile) loss terms ρ_q(y − b), elementwise."""
    u = np.asarray(actual, dtype=np.float64) - np.asarray(bound, dtype=np.float64)
    return np.maximum(q * u, (q - 1) * u)


def weighted_quantile_loss(
    actual: np.ndarray,
    bounds: tuple[np.ndarray, ...],
    quantiles: tuple[float, ...],
    valid: np.ndarray | None = None,
) -> np.ndarray:
    """Mean over the quantiles of ``100 · 2 Σ ρ_q / Σ|y|`` per series."""
    y = np.asarray(actual, dtype=np.float64)
    parts = [
        _share(2 * pinball(y, b, q), np.abs(y), valid)
        for b, q in zip(bounds, quantiles, strict=True)
    ]
    return np.mean(np.stack(parts), axis=0)


def _share(num: np.ndarray, den: np.ndarray, valid: np.ndarray | None) -> np.ndarray:
    n, d = _flat(num), _flat(den)
    if valid is not None:
        v = _flat(np.broadcast_to(valid, num.shape)) > 0
        n, d = np.where(v, n, 0.0), np.where(v, d, 0.0)
    top, bottom = n.sum(axis=1), d.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(bottom > 0, 100 * top / np.where(bottom > 0, bottom, 1.0), np.nan)


def coverage(
    actual: np.ndarray, lower: np.ndarray, upper: np.ndarray, valid: np.ndarray | None = None
) -> np.ndarray:
    """Fraction of observations inside [lower, upper]; ~0.8 is right for a 10–90 % band."""
    y = np.asarray(actual, dtype=np.float64)
    inside = (y >= np.asarray(lower)) & (y <= np.asarray(upper))
    return _mean(inside.astype(np.float64), valid)


def naive_abs_errors(
    insample: np.ndarray, season: int, valid: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """|y_t − y_{t−m}| for t ≥ m and whether both ends are real observations."""
    y = np.asarray(insample, dtype=np.float64)
    lag = season_lag(season)
    err = np.abs(y[:, lag:] - y[:, :-lag])
    ok = np.ones(err.shape, dtype=bool) if valid is None else valid[:, lag:] & valid[:, :-lag]
    return err, ok


def mase_scale(insample: np.ndarray, season: int, valid: np.ndarray | None = None) -> np.ndarray:
    """In-sample MAE of the seasonal naive forecast (the MASE denominator), per series."""
    y = np.asarray(insample, dtype=np.float64)
    if y.shape[1] <= season_lag(season):
        return np.full(y.shape[0], np.nan)
    err, ok = naive_abs_errors(y, season, valid)
    return _mean(err, ok)


def _ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    # A zero scale (the history repeats exactly) makes MASE 0 for a perfect forecast
    # and infinite for any error: the benchmark was perfect, so anything else is worse.
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    out = np.where((den == 0) & (num == 0), 0.0, out)
    return np.where((den == 0) & (num > 0), np.inf, out)


def mase(
    actual: np.ndarray,
    forecast: np.ndarray,
    insample: np.ndarray,
    season: int,
    valid: np.ndarray | None = None,
    insample_valid: np.ndarray | None = None,
) -> np.ndarray:
    """MASE per series: forecast MAE / in-sample seasonal-naive MAE."""
    return _ratio(mae(actual, forecast, valid), mase_scale(insample, season, insample_valid))


def origins(
    length: int, horizon: int, *, count: int = 3, spacing: int, min_train: int
) -> np.ndarray:
    """Forecast origins (first forecast index), latest last: the newest origin leaves
    exactly ``horizon`` points to score, earlier ones step back by ``spacing``; only
    those with at least ``min_train`` points before them are kept."""
    if count < 1 or spacing < 1 or horizon < 1:
        raise ForecastError("rolling-origin evaluation needs count, spacing and horizon ≥ 1")
    o = length - horizon - spacing * np.arange(count)[::-1]
    return o[o >= max(min_train, 1)]


@dataclass(frozen=True, eq=False)
class Backtest:
    """Forecasts of one method from several origins, and how they are scored."""

    origins: np.ndarray  # (K,) first forecast index per origin
    forecast: np.ndarray  # (N, K, H)
    actual: np.ndarray  # (N, K, H)
    valid: np.ndarray  # (N, K, H) bool: score this point
    scale: np.ndarray  # (N, K) MASE denominator from the data before each origin
    ok: np.ndarray  # (N,) bool: the method forecast this series at every origin

    def rows(self, idx: np.ndarray) -> Backtest:
        """The same backtest for a subset of the series."""
        return Backtest(
            origins=self.origins,
            forecast=self.forecast[idx],
            actual=self.actual[idx],
            valid=self.valid[idx],
            scale=self.scale[idx],
            ok=self.ok[idx],
        )

    @property
    def residuals(self) -> np.ndarray:
        """actual − forecast (0 where not valid; read ``valid``)."""
        return np.where(self.valid, self.actual - self.forecast, 0.0)

    def mae(self) -> np.ndarray:
        return mae(self.actual, self.forecast, self.valid)

    def mase(self) -> np.ndarray:
        """Mean over origins of each origin's MASE (each origin has its own training set)."""
        per = _ratio(
            np.stack(
                [
                    mae(self.actual[:, k], self.forecast[:, k], self.valid[:, k])
                    for k in range(len(self.origins))
                ],
                axis=1,
            ),
            self.scale,
        )
        with np.errstate(invalid="ignore"):
            scored = np.isfinite(per) | np.isinf(per)
            total = np.where(scored, per, 0.0).sum(axis=1)
            n = scored.sum(axis=1)
        out = np.where(n > 0, total / np.maximum(n, 1), np.nan)
        return np.where(self.ok, out, np.nan)

    def smape(self) -> np.ndarray:
        return smape(self.actual, self.forecast, self.valid)

    def wape(self) -> np.ndarray:
        return np.where(self.ok, wape(self.actual, self.forecast, self.valid), np.nan)

    def scores(self) -> dict[str, np.ndarray]:
        return {"mase": self.mase(), "smape": self.smape(), "mae": self.mae(), "wape": self.wape()}


def training_origins(t_len: int, h_eval: int, season: int, spacing: int, count: int) -> np.ndarray:
    """Rolling origins with two seasons of training before each (what the seasonal
    methods need), when that still leaves a week of daily origins; else with one
    season before each, as many as fit. An origin a method cannot train at
    disqualifies the method for the series, so the first choice keeps the
    multi-season methods and Holt-Winters in the running."""
    least = min(count, 7)
    at = origins(t_len, h_eval, count=count, spacing=spacing, min_train=max(2, 2 * season))
    if at.size >= least:
        return at
    return origins(t_len, h_eval, count=count, spacing=spacing, min_train=max(2, season))


def rolling_origin(
    y: np.ndarray,
    call: MethodCall,
    *,
    season: int,
    horizon: int,
    at: np.ndarray,
    valid: np.ndarray | None = None,
) -> Backtest:
    """Forecast ``horizon`` steps from the data strictly before each origin in ``at``
    and line the forecasts up with what happened. ``call(train)`` returns (N, H); a
    row it could not forecast comes back non-finite and is marked not ``ok``."""
    a = np.asarray(y, dtype=np.float64)
    n, t = a.shape
    v = np.ones(a.shape, dtype=bool) if valid is None else np.asarray(valid, dtype=bool)
    at = np.asarray(at, dtype=np.int64)
    if at.size and (at.min() < 1 or at.max() + horizon > t):
        raise ForecastError(f"origins {at.tolist()} with horizon {horizon} do not fit {t} points")
    k = len(at)
    fc = np.zeros((n, k, horizon))
    act = np.zeros((n, k, horizon))
    val = np.zeros((n, k, horizon), dtype=bool)
    ok = np.ones(n, dtype=bool)
    # The MASE denominator at every origin from one cumulative pass over the history.
    err, pair_ok = naive_abs_errors(a, season, v)
    lag = season_lag(season)
    csum = np.concatenate([np.zeros((n, 1)), np.cumsum(np.where(pair_ok, err, 0.0), axis=1)], 1)
    ccnt = np.concatenate([np.zeros((n, 1)), np.cumsum(pair_ok, axis=1)], 1)
    scale = np.full((n, k), np.nan)
    for j, o in enumerate(at):
        out = np.asarray(call(a[:, :o]), dtype=np.float64)
        if out.shape != (n, horizon):
            raise ForecastError(f"method returned shape {out.shape}, expected {(n, horizon)}")
        good = np.all(np.isfinite(out), axis=1)
        ok &= good
        fc[:, j] = np.where(good[:, None], out, 0.0)
        act[:, j] = a[:, o : o + horizon]
        val[:, j] = v[:, o : o + horizon] & good[:, None]
        idx = max(o - lag, 0)
        with np.errstate(invalid="ignore", divide="ignore"):
            scale[:, j] = np.where(
                ccnt[:, idx] > 0, csum[:, idx] / np.maximum(ccnt[:, idx], 1), np.nan
            )
    val &= ok[:, None, None]
    return Backtest(origins=at, forecast=fc, actual=act, valid=val, scale=scale, ok=ok)
