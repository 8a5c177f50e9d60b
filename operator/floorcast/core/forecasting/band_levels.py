"""Forecast quantiles at several levels, from the residuals the band is sized on.

A policy's ``serviceLevel`` sizes its floor on the forecast's quantile at that level
(docs/policy.md, "serviceLevel"; docs/formats.md, "Quantiles"), so the forecaster
writes a few levels beside the 90 % band. Each level goes through exactly the band's
pipeline (``bands.from_backtests``): residuals standardised per slice of the day,
pooled horizon blocks, Hyndman & Fan type 6 empirical quantiles, isotonic widening,
the wider of the absolute and signed residuals' edge, and the held-out jackknife
stretch of that edge. A level above 0.5 is the upper edge of the band (1 − q, q), a
level below 0.5 the lower edge of (q, 1 − q), 0.5 the upper edge's median; so the
quantile at the band's own upper level *is* the upper band. The stretch is the one
measured for the band's edge, applied to every level on that side (one factor per
series and side keeps the levels in order; measuring one per level would multiply the
held-out loop's cost by the number of levels).
"""

from __future__ import annotations

from collections.abc import Sequence
from itertools import pairwise

import numpy as np

from floorcast.core.forecasting import bands
from floorcast.core.forecasting.evaluation import Backtest
from floorcast.core.quantiles import MAX_QUANTILES
from floorcast.errors import InputError

#: What ``floorcast forecast`` writes by default: the median and the service levels a
#: floor is usually sized on (common practice, no source).
DEFAULT_LEVELS = (0.5, 0.8, 0.9, 0.95, 0.99)


def check_levels(levels: Sequence[float]) -> tuple[float, ...]:
    """Levels strictly increasing in (0, 1), at most ``MAX_QUANTILES``."""
    try:
        lv = tuple(float(x) for x in levels)
    except (TypeError, ValueError):
        raise InputError(f"quantile levels must be numbers, got {levels!r}") from None
    if len(lv) > MAX_QUANTILES:
        raise InputError(f"{len(lv)} quantile levels, over the limit of {MAX_QUANTILES}")
    if any(not 0 < x < 1 for x in lv) or any(b <= a for a, b in pairwise(lv)):
        raise InputError(f"quantile levels must be strictly increasing in (0, 1), got {levels!r}")
    return lv


def pair(level: float) -> tuple[tuple[float, float], int]:
    """The band whose edge is this level, and which edge (0 lower, 1 upper). The other
    edge of the pair is computed and dropped: the two edges never interact."""
    if level > 0.5:
        return (1.0 - level, level), 1
    if level == 0.5:
        return (0.25, 0.5), 1
    return (level, 1.0 - level), 0


def level_offsets(
    backtests: dict[str, Backtest],
    methods: Sequence[str],
    horizon: int,
    levels: Sequence[float],
    *,
    pool: int | None = None,
    start: int = 0,
    period: int = 0,
    calibration: dict[str, np.ndarray] | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Offsets (N, L, H) from the point forecast at each level, and ``ok`` (N,) as
    ``bands.from_backtests`` gives it (False: too few residuals, use ``insample``)."""
    out = np.zeros((len(methods), len(levels), horizon))
    ok = np.ones(len(methods), dtype=bool)
    for j, q in enumerate(levels):
        qs, side = pair(q)
        lo, hi, good = bands.from_backtests(
            backtests, methods, horizon, qs, pool=pool, start=start, period=period,
            calibration=calibration,
        )  # fmt: skip
        out[:, j] = hi if side else lo
        ok &= good
    return out, ok


def insample_offsets(
    y: np.ndarray, season: int, valid: np.ndarray | None, levels: Sequence[float]
) -> np.ndarray:
    """(N, L) offsets from in-sample seasonal-naive errors, the band's fallback."""
    cols = []
    for q in levels:
        qs, side = pair(q)
        cols.append(bands.insample_quantiles(y, season, valid, qs)[side])
    return np.stack(cols, axis=1) if cols else np.zeros((len(y), 0))


def apply_levels(point: np.ndarray, offsets: np.ndarray, levels: Sequence[float]) -> np.ndarray:
    """(N, L, H) quantile values: point + offset, non-negative, below the point for
    levels under 0.5 and above it from 0.5 up (as ``bands.apply_offsets`` places the
    band), and non-decreasing across levels at every point. The offsets already are
    in order (every step of the band's pipeline keeps a larger level's edge outside a
    smaller one's, and one stretch per side scales them alike); the running maximum
    only removes float rounding."""
    p = np.maximum(np.asarray(point, dtype=np.float64), 0.0)[:, None, :]
    lv = np.asarray(levels, dtype=np.float64)[None, :, None]
    o = np.broadcast_to(offsets if offsets.ndim == 3 else offsets[..., None], (*p.shape[:1],
                        len(levels), p.shape[2]))  # fmt: skip
    v = np.where(lv < 0.5, np.clip(p + o, 0.0, p), np.maximum(p + o, p))
    return np.maximum.accumulate(v, axis=1)
