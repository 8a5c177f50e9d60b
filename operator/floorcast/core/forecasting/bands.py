"""Prediction bands from the errors a method actually made, horizon step by step.

Rolling-origin evaluation leaves, per series, a few forecasts (one per origin) and
what happened after each; the band at horizon step h comes from the empirical
quantiles of those residuals near h. A few origins give only a few residuals per
step, so neighbouring steps are pooled in blocks. Widths are then made
non-decreasing with the horizon by isotonic regression: a forecast cannot know the
far future better than the near one, so a band that narrows with the horizon is
sampling noise. Offsets are forced to straddle zero so that ``lower ≤ value ≤
upper`` holds as ``Series`` requires. Quantiles are Hyndman & Fan's (1996) type 6
(numpy's "weibull"): with a few dozen residuals per block numpy's default type 7
gives 80 % bands that cover ~76 %, type 6 is unbiased for that coverage.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from floorcast.core.forecasting.evaluation import Backtest, naive_abs_errors, pinball, season_lag
from floorcast.core.forecasting.preprocess import nan_quantiles
from floorcast.errors import InputError

DEFAULT_QUANTILES = (0.1, 0.9)
#: Fewer pooled residuals than this in a block and its quantile is not trusted; the
#: block then barely weighs in the fit (common practice, no source).
MIN_SAMPLES = 10
QUANTILE_METHOD = "weibull"
#: Slices of the day the band's width is calibrated in (hours), and the least share of
#: the series' typical error a slice's width may shrink to (common practice, no source).
PHASE_BINS = 24
SCALE_FLOOR = 0.05
#: Pseudo-residuals at the series' overall typical error added to every slice: enough
#: to tame a slice seen only a dozen times, few enough not to drag a busy slice's
#: width towards the night's (10 left the busy hours of a synthetic test at 72 %
#: coverage for a nominal 80 %; common practice, no source).
SCALE_PRIOR = 3
#: How far the held-out calibration may stretch or shrink a band edge (common
#: practice, no source: beyond it the held-out days say more about themselves).
CALIBRATION_BOUNDS = (1.0, 3.0)


def check_quantiles(quantiles: tuple[float, float]) -> tuple[float, float]:
    try:
        lo, hi = (float(q) for q in quantiles)
    except (TypeError, ValueError):
        raise InputError(f"quantiles must be a (lower, upper) pair, got {quantiles!r}") from None
    if not 0 < lo < hi < 1:
        raise InputError(f"quantiles must satisfy 0 < lower < upper < 1, got {quantiles!r}")
    return lo, hi


def default_pool(horizon: int) -> int:
    """Steps pooled per block: 1/24 of the horizon (an hour of a day), at least 5."""
    return max(5, horizon // 24)


def isotonic_increasing(y: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Weighted least-squares non-decreasing fit of each row, by the min-max formula
    ŷ_i = max_{j≤i} min_{k≥i} mean_w(y_j..y_k) (Robertson, Wright & Dykstra 1988,
    "Order Restricted Statistical Inference", from memory). O(B²) per row, meant for
    a few dozen blocks, and fully vectorized across rows."""
    n, b = y.shape
    cw = np.concatenate([np.zeros((n, 1)), np.cumsum(w, axis=1)], axis=1)
    cy = np.concatenate([np.zeros((n, 1)), np.cumsum(w * y, axis=1)], axis=1)
    num = cy[:, None, 1:] - cy[:, :-1, None]  # [j, k] = Σ_{j..k} w·y
    den = cw[:, None, 1:] - cw[:, :-1, None]
    upper = np.triu(np.ones((b, b), dtype=bool))  # k ≥ j
    with np.errstate(invalid="ignore", divide="ignore"):
        avg = np.where(upper, num / den, np.inf)
    suffix_min = np.minimum.accumulate(avg[..., ::-1], axis=-1)[..., ::-1]  # min over k ≥ i
    return np.where(upper, suffix_min, -np.inf).max(axis=1)  # max over j ≤ i


def residual_quantiles(
    residuals: np.ndarray,
    valid: np.ndarray,
    quantiles: tuple[float, float] = DEFAULT_QUANTILES,
    *,
    pool: int | None = None,
    min_samples: int = MIN_SAMPLES,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Lower and upper offsets (N, H) from residuals (N, K, H), monotone in width.

    Horizon steps are pooled in blocks of ``pool`` steps (all origins together); the
    block quantiles are made monotone by weighted isotonic regression (upper offset
    non-decreasing, lower non-increasing) and read linearly between block centres.
    A running maximum would also be monotone, but the maximum of many noisy block
    estimates is biased outwards (80 % bands covering ~88 % of Gaussian noise in the
    tests); the least-squares fit keeps the average width. Returns (lower offset ≤ 0,
    upper offset ≥ 0, ok (N,)); ``ok`` is False for a series with fewer than
    ``min_samples`` valid residuals in all, whose offsets are 0 and must come from
    elsewhere.
    """
    qs = check_quantiles(quantiles)
    r = np.where(valid, residuals, np.nan).astype(np.float64)
    n, k, h = r.shape
    if k == 0 or h == 0:
        return np.zeros((n, h)), np.zeros((n, h)), np.zeros(n, dtype=bool)
    size = default_pool(h) if pool is None else max(int(pool), 1)
    nb = -(-h // size)
    pad = np.full((n, k, nb * size), np.nan)
    pad[..., :h] = r
    blocks = pad.reshape(n, k, nb, size).transpose(0, 2, 1, 3).reshape(n, nb, k * size)
    q, count = nan_quantiles(blocks, qs, method=QUANTILE_METHOD)  # (N, B, 2), (N, B)
    whole, total = nan_quantiles(r.reshape(n, -1), qs, method=QUANTILE_METHOD)
    thin = count < min_samples
    q = np.where(thin[..., None], whole[:, None, :], q)
    weight = np.where(thin, 1e-6, count.astype(np.float64))
    lo_b = -isotonic_increasing(-np.minimum(q[..., 0], 0.0), weight)
    hi_b = isotonic_increasing(np.maximum(q[..., 1], 0.0), weight)
    # Linear between block centres, flat beyond the first and last.
    centre = np.minimum(np.arange(nb) * size + (size - 1) / 2, (np.arange(nb) * size + h - 1) / 2)
    x = np.arange(h, dtype=np.float64)
    i1 = np.clip(np.searchsorted(centre, x, side="right"), 1, max(nb - 1, 1))
    i0 = i1 - 1
    if nb == 1:
        f = np.zeros(h)
        i0 = i1 = np.zeros(h, dtype=np.int64)
    else:
        f = np.clip((x - centre[i0]) / (centre[i1] - centre[i0]), 0.0, 1.0)
    # The fit is monotone; the running extremes only remove float rounding from it.
    lo = np.minimum.accumulate(lo_b[:, i0] * (1 - f) + lo_b[:, i1] * f, axis=1)
    hi = np.maximum.accumulate(hi_b[:, i0] * (1 - f) + hi_b[:, i1] * f, axis=1)
    ok = total >= min_samples
    lo[~ok], hi[~ok] = 0.0, 0.0
    return lo, hi, ok


def insample_quantiles(
    y: np.ndarray,
    season: int,
    valid: np.ndarray | None = None,
    quantiles: tuple[float, float] = DEFAULT_QUANTILES,
) -> tuple[np.ndarray, np.ndarray]:
    """Offsets (N,) from the in-sample seasonal-naive errors y_t − y_{t−m}: the fallback
    when the history is too short for rolling origins. Constant over the horizon, so
    it understates far-horizon error for methods that drift; the metadata says so."""
    qs = check_quantiles(quantiles)
    a = np.asarray(y, dtype=np.float64)
    lag = season_lag(season)
    if a.shape[1] <= lag:
        return np.zeros(a.shape[0]), np.zeros(a.shape[0])
    _, ok = naive_abs_errors(a, season, valid)
    d = np.where(ok, a[:, lag:] - a[:, :-lag], np.nan)
    q, _ = nan_quantiles(d, qs, method=QUANTILE_METHOD)
    return np.minimum(q[:, 0], 0.0), np.maximum(q[:, 1], 0.0)


def apply_offsets(
    point: np.ndarray, lo: np.ndarray, hi: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(point, lower, upper), all ≥ 0 and ordered. Offsets shorter than the horizon
    hold their last value; (N,) offsets apply to every step."""
    p = np.maximum(np.asarray(point, dtype=np.float64), 0.0)
    n, h = p.shape

    def fit(o: np.ndarray) -> np.ndarray:
        o = np.asarray(o, dtype=np.float64)
        if o.ndim == 1:
            return np.broadcast_to(o[:, None], (n, h))
        if o.shape[1] >= h:
            return o[:, :h]
        return np.concatenate([o, np.repeat(o[:, -1:], h - o.shape[1], axis=1)], axis=1)

    lower = np.clip(p + fit(lo), 0.0, p)
    upper = np.maximum(p + fit(hi), p)
    return p, lower, upper


def symmetric(res: np.ndarray, valid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Residuals mirrored about zero (origins axis doubled): quantiles of the result
    are ± quantiles of |residual|, the absolute-residual score of split conformal
    prediction (Lei, G'Sell, Rinaldo, Tibshirani & Wasserman, "Distribution-Free
    Predictive Inference for Regression", JASA 2018 — cited from memory).

    Why: with a few origins the *signed* residuals carry the bias of those particular
    days, and a band placed by them misses when the forecast day's bias differs. On
    the Taylor benchmark (tests/perf/bench_accuracy.py) signed bands covered 60 % of
    held-out points against a nominal 80 %, absolute ones 76 %."""
    return np.concatenate([res, -res], axis=1), np.concatenate([valid, valid], axis=1)


def phase_period(season: int) -> int:
    """The day in steps: the season itself, or a seventh of it when it is a week (a day
    that divides 24 h is never a multiple of 7 steps, 86 400 s = 2⁷·3³·5² s)."""
    return season // 7 if season >= 14 and season % 7 == 0 else season


def phase_bin(positions: np.ndarray, period: int) -> np.ndarray:
    """Which of ``PHASE_BINS`` equal slices of the day each absolute index falls in."""
    nb = min(PHASE_BINS, period)
    return ((np.asarray(positions) % period) * nb) // period


def phase_scale(
    residuals: np.ndarray, valid: np.ndarray, positions: np.ndarray, period: int
) -> np.ndarray:
    """(N, bins) typical |residual| per slice of the day, shrunk towards the series'
    overall mean by ``SCALE_PRIOR`` pseudo-observations and floored at
    ``SCALE_FLOOR`` of it; 1 where a series has no residual at all."""
    n = residuals.shape[0]
    nb = min(PHASE_BINS, period)
    onehot = np.eye(nb)[phase_bin(positions, period).reshape(-1)]  # (K·H, bins)
    a = np.where(valid, np.abs(residuals), 0.0).reshape(n, -1)
    c = valid.reshape(n, -1).astype(np.float64)
    sums, counts = a @ onehot, c @ onehot
    total, count = sums.sum(axis=1), counts.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        overall = np.where(count > 0, total / np.maximum(count, 1), 0.0)[:, None]
        s = (sums + SCALE_PRIOR * overall) / (counts + SCALE_PRIOR)
    s = np.maximum(s, SCALE_FLOOR * overall)
    return np.where(overall > 0, s, 1.0)


def phase_offsets(
    residuals: np.ndarray,
    valid: np.ndarray,
    positions: np.ndarray,
    out_positions: np.ndarray,
    period: int,
    quantiles: tuple[float, float] = DEFAULT_QUANTILES,
    *,
    pool: int | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Band offsets (N, len(out_positions)) calibrated per slice of the day.

    Human load is quiet at night and busy at noon, and so are its forecast errors: one
    width for the whole day (or a width that may only grow with the horizon) is too
    wide at night and too narrow at the peak, where a replica floor needs it. So each
    residual is divided by its slice's typical error (``phase_scale``), the band is
    sized on those standardised residuals as before (horizon blocks, isotonic
    widening, absolute residuals), and multiplied back by the typical error of the
    slice each forecast step falls in. ``positions`` (K, H) are the residuals'
    absolute indices, ``out_positions`` the forecast's; ``period`` < 2 means no
    phase (plain horizon bands)."""
    n = residuals.shape[0]
    if period >= 2:
        s = phase_scale(residuals, valid, positions, period)
        s_res = s[:, phase_bin(positions, period)]
        s_out = s[:, phase_bin(out_positions, period)]
    else:
        s_res, s_out = np.ones(residuals.shape), np.ones((n, len(out_positions)))
    z = np.where(valid, residuals / s_res, 0.0)
    lo, hi, ok = residual_quantiles(*symmetric(z, valid), quantiles, pool=pool)
    # The wider of the absolute and the signed residuals' edge, side by side: absolute
    # residuals resist the sign noise of a few origins (``symmetric``), signed ones
    # keep a bias that persists (a forecast that ran low every recent day); on the
    # pedestrian data of bench_accuracy.py the 90 % bound covered 85 % with absolute
    # residuals alone and 86-88 % with the wider of the two.
    lo_s, hi_s, _ = residual_quantiles(z, valid, quantiles, pool=pool)
    lo, hi = np.minimum(lo, lo_s), np.maximum(hi, hi_s)
    h_out = len(out_positions)
    lo, hi = _extend(lo, h_out), _extend(hi, h_out)
    return lo * s_out, hi * s_out, ok


def _extend(o: np.ndarray, h: int) -> np.ndarray:
    if o.shape[1] >= h:
        return o[:, :h]
    return np.concatenate([o, np.repeat(o[:, -1:], h - o.shape[1], axis=1)], axis=1)


def _positions(bt: Backtest) -> np.ndarray:
    return bt.origins[:, None] + np.arange(bt.forecast.shape[2])[None, :]


def from_backtests(
    backtests: dict[str, Backtest],
    methods: Sequence[str],
    horizon: int,
    quantiles: tuple[float, float] = DEFAULT_QUANTILES,
    *,
    pool: int | None = None,
    start: int = 0,
    period: int = 0,
    calibration: dict[str, np.ndarray] | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Offsets (N, horizon) for each series from the backtest of the method it uses,
    one vectorized pass per method; ``start`` is the forecast's first absolute index
    (the history's length), ``period`` the day in steps (0: no phase calibration),
    ``calibration`` per method the (2, N) held-out stretch of each edge (``holdout``);
    ``ok`` False where the backtest gave too few residuals."""
    n = len(methods)
    lo, hi = np.zeros((n, horizon)), np.zeros((n, horizon))
    ok = np.zeros(n, dtype=bool)
    names = np.asarray(methods, dtype=object)
    out = start + np.arange(horizon)
    for name, bt in backtests.items():
        rows = np.flatnonzero(names == name)
        if rows.size and bt.forecast.shape[1]:
            a, b, good = phase_offsets(
                bt.residuals[rows], bt.valid[rows], _positions(bt), out, period, quantiles,
                pool=pool,
            )  # fmt: skip
            if calibration is not None and name in calibration:
                c = calibration[name][:, rows]
                a, b = a * c[0][:, None], b * c[1][:, None]
            lo[rows], hi[rows], ok[rows] = a, b, good
    return lo, hi, ok


def holdout(
    bt: Backtest,
    quantiles: tuple[float, float] = DEFAULT_QUANTILES,
    *,
    pool: int | None = None,
    period: int = 0,
) -> dict[str, np.ndarray]:
    """Out-of-sample band scores per series: each origin's actuals against bands sized
    from the *other* origins' residuals (leave one origin out), as the engine sizes
    them. ``coverage`` of [lower, upper], ``upper_coverage`` (share at or under the
    upper bound) and ``wql``, the weighted quantile loss of both bounds
    (``evaluation.weighted_quantile_loss``). The engine's own bands use all origins,
    so these slightly understate their quality; NaN with fewer than two origins."""
    n, k, _ = bt.forecast.shape
    nan = np.full(n, np.nan)
    if k < 2:
        return {
            "calibration": np.ones((2, n)),
            "coverage": nan,
            "upper_coverage": nan.copy(),
            "wql": nan.copy(),
        }
    inside, under, count = np.zeros(n), np.zeros(n), np.zeros(n)
    loss, weight = np.zeros(n), np.zeros(n)
    res, pos = bt.residuals, _positions(bt)
    ratios: list[np.ndarray] = []
    for j in range(k):
        others = [i for i in range(k) if i != j]
        lo, hi, ok = phase_offsets(
            res[:, others], bt.valid[:, others], pos[others], pos[j], period, quantiles,
            pool=pool,
        )  # fmt: skip
        _, lower, upper = apply_offsets(bt.forecast[:, j], lo, hi)
        v = bt.valid[:, j] & ok[:, None]
        y = bt.actual[:, j]
        with np.errstate(invalid="ignore", divide="ignore"):
            ratios.append(
                np.stack([np.where(v & (o != 0), res[:, j] / o, np.nan) for o in (lo, hi)])
            )
        inside += ((y >= lower) & (y <= upper) & v).sum(axis=1)
        under += ((y <= upper) & v).sum(axis=1)
        count += v.sum(axis=1)
        for b, q in zip((lower, upper), quantiles, strict=True):
            loss += np.where(v, 2 * pinball(y, b, q), 0.0).sum(axis=1) / len(quantiles)
        weight += np.where(v, np.abs(y), 0.0).sum(axis=1)
    # Jackknife calibration: the factor by which each edge, sized from the other
    # origins, would have had to be stretched to hold the nominal share on the
    # held-out one (Barber, Candès, Ramdas & Tibshirani 2021, "Predictive inference
    # with the jackknife+", Annals of Statistics 49 — cited from memory).
    r = np.concatenate(ratios, axis=2)  # (2, N, K·H)
    levels = (1 - quantiles[0], quantiles[1])
    factor = np.stack(
        [nan_quantiles(r[i], (levels[i],), method=QUANTILE_METHOD)[0][:, 0] for i in (0, 1)]
    )
    enough = np.sum(np.isfinite(r), axis=2) >= MIN_SAMPLES
    factor = np.where(enough, np.clip(factor, *CALIBRATION_BOUNDS), 1.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return {
            "calibration": factor,  # (2, N): lower, upper
            "coverage": np.where(count > 0, inside / np.maximum(count, 1), np.nan),
            "upper_coverage": np.where(count > 0, under / np.maximum(count, 1), np.nan),
            "wql": np.where(weight > 0, 100 * loss / np.where(weight > 0, weight, 1), np.nan),
        }


def holdout_coverage(
    bt: Backtest,
    quantiles: tuple[float, float] = DEFAULT_QUANTILES,
    *,
    pool: int | None = None,
    period: int = 0,
) -> np.ndarray:
    """Held-out coverage of [lower, upper] only (see ``holdout``)."""
    return holdout(bt, quantiles, pool=pool, period=period)["coverage"]
