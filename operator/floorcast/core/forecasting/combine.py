"""``combination``: the mean of a series' best few methods, scored without hindsight.

Averaging the forecasts of a few good methods is one of the most reliable gains in
forecasting practice: their errors are partly independent, so the mean is rarely
worse than the best of them and often better (Bates & Granger 1969, "The combination
of forecasts", Operational Research Quarterly 20; the M4 competition's findings —
both cited from memory). Which methods are "best" is a per-series choice made from
the rolling-origin errors, so scoring the combination on the same origins that chose
its members would flatter it. Here the members for origin j are chosen by WAPE on the
*other* origins (leave one origin out), and only then scored on origin j: the
combination competes in ``auto`` on the same out-of-sample footing as every method.
The final forecast averages the ``PARTS`` methods ranked best over all origins.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from floorcast.core.forecasting.evaluation import Backtest

COMBINATION = "combination"
#: Members averaged (common practice, no source: two to five is the usual range).
PARTS = 3
#: Fewer usable members than this and it is no combination.
MIN_PARTS = 2


def _top(key: np.ndarray, parts: int, least: int = MIN_PARTS) -> np.ndarray:
    """(..., M) key to minimise -> (..., M) weights: 1/p on the best p finite ones
    (none where fewer than ``least`` are finite)."""
    order = np.argsort(key, axis=-1, kind="stable")
    rank = np.argsort(order, axis=-1, kind="stable")
    finite = np.isfinite(key)
    p = np.minimum(finite.sum(axis=-1, keepdims=True), parts)
    pick = (rank < p) & finite
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(pick & (p >= least), 1.0 / np.maximum(p, 1), 0.0)


def weights(key: np.ndarray, parts: int = PARTS, least: int = MIN_PARTS) -> np.ndarray:
    """(N, M) member weights for the final forecast from the point-error key (N, M)."""
    return _top(np.where(np.isnan(key), np.inf, key), parts, least)


def backtest(backtests: dict[str, Backtest], names: Sequence[str]) -> Backtest:
    """The combination's rolling-origin backtest, members chosen leave-one-origin-out."""
    bts = [backtests[n] for n in names]
    first = bts[0]
    n, k, h = first.forecast.shape
    err = np.stack(
        [np.where(b.valid, np.abs(b.actual - b.forecast), 0.0).sum(axis=2) for b in bts], axis=1
    )  # (N, M, K)
    load = np.stack([np.where(b.valid, np.abs(b.actual), 0.0).sum(axis=2) for b in bts], axis=1)
    ok = np.stack([b.ok for b in bts], axis=1)  # (N, M)
    with np.errstate(invalid="ignore", divide="ignore"):
        loo = (err.sum(axis=2, keepdims=True) - err) / (load.sum(axis=2, keepdims=True) - load)
    loo = np.where(ok[:, :, None] & np.isfinite(loo), loo, np.inf)
    w = _top(loo.transpose(0, 2, 1), PARTS)  # (N, K, M)
    fc = np.zeros((n, k, h))
    valid = np.zeros((n, k, h), dtype=bool)
    for m, b in enumerate(bts):
        wm = w[:, :, m]
        fc += wm[:, :, None] * b.forecast
        valid |= (wm > 0)[:, :, None] & b.valid
    usable = (w > 0).sum(axis=2) >= MIN_PARTS  # (N, K)
    return Backtest(
        origins=first.origins,
        forecast=fc,
        actual=first.actual,
        valid=valid & usable[:, :, None],
        scale=first.scale,
        ok=usable.all(axis=1),
    )
