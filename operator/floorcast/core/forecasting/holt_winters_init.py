"""Initial Holt-Winters states, for many series at once.

* ``heuristic``: Hyndman, Koehler, Ord & Snyder, *Forecasting with Exponential
  Smoothing: The State Space Approach* (Springer 2008), §2.6.1, as statsmodels
  implements it (``initialization_method="heuristic"``): a 2×m moving average over the
  first (up to five) seasons gives the trend-cycle; the per-phase mean of the
  detrended values, centred, gives the seasonal states; a straight line through the
  first ten trend-cycle values gives level and slope. Reproduced exactly so the two
  can be compared state for state.
* ``double``: for two seasons (daily m inside weekly m2) there is no standard
  heuristic, so this one is ours: a straight line through the weekly means gives level
  and slope; the per-phase mean over all full weeks of the detrended values is the
  weekly profile; its mean over the days of the week is the daily seasonal, and what
  is left (zero-mean at every daily phase) is the weekly seasonal.
* ``simple``: statsmodels' "simple" states, for seasons too short for the heuristic.
* ``least_squares``: the exactly SSE-optimal states for given parameters (additive
  seasonality, or none). With fixed parameters the additive recursions are linear and
  time-invariant in (y, initial states), so the one-step errors are ``e = e0 - D x0``.
  Nothing reads phase j's initial seasonal before time j, so its column of ``D`` is
  phase 0's response delayed by j: ``D`` needs three filter runs and ``D'D`` only
  correlations (numpy.fft) plus a tail correction. A constant moves freely between
  level and seasonals (same fitted values), so the seasonals are pinned to sum to 0.
* ``frozen_level_seasonals`` and ``gauss_newton``: the multiplicative counterpart,
  which is not linear; both are descent steps kept only where they lower the SSE.
"""

from __future__ import annotations

import numpy as np

from floorcast.core.forecasting import holt_winters_filter as hwf
from floorcast.core.forecasting.holt_winters_filter import Spec, States

#: statsmodels' heuristic fits its line through this many trend-cycle values.
_LINE_POINTS = 10


def heuristic_min_length(m: int) -> int:
    """statsmodels' minimum for the heuristic: ten trend-cycle values left after the MA."""
    return max(_LINE_POINTS, 2 * m, _LINE_POINTS + 2 * (m // 2)) if m else _LINE_POINTS


def heuristic(y: np.ndarray, spec: Spec) -> States:
    """Hyndman et al. (2008) §2.6.1 initial states, as statsmodels computes them."""
    n_s, n_t = y.shape
    m = spec.m
    season = None
    x = y[:, :_LINE_POINTS]
    if m:
        k = max(min(5, n_t // m), int(np.ceil((_LINE_POINTS + 2 * (m // 2)) / m)))
        n = min(k * m, n_t)
        cs = np.concatenate([np.zeros((n_s, 1)), np.cumsum(y[:, :n], axis=1)], axis=1)
        h = m // 2
        idx = np.arange(h, n - m + h + 1)  # pandas rolling(m, center=True) positions
        ma = (cs[:, idx - h + m] - cs[:, idx - h]) / m
        if m % 2 == 0:  # then .shift(-1).rolling(2).mean(): the centred 2×m average
            ma, idx = 0.5 * (ma[:, :-1] + ma[:, 1:]), idx[:-1]
        det = np.full((n_s, k * m), np.nan)
        det[:, idx] = y[:, idx] / ma if spec.mult else y[:, idx] - ma
        season = np.nanmean(det.reshape(n_s, k, m), axis=1)
        if spec.mult:
            season /= season.mean(axis=1, keepdims=True)
        else:
            season -= season.mean(axis=1, keepdims=True)
        x = ma[:, :_LINE_POINTS]
    exog = np.c_[np.ones(_LINE_POINTS), np.arange(_LINE_POINTS) + 1.0]
    coef = x @ np.linalg.pinv(exog).T
    trend = coef[:, 1] if spec.trend else np.zeros(n_s)
    return States(coef[:, 0], trend, season, None)


def double(y: np.ndarray, spec: Spec) -> States:
    """Level, slope, daily and weekly states from all full weeks (see module doc)."""
    n_s, n_t = y.shape
    m, m2 = spec.m, spec.m2
    k = n_t // m2
    weeks = y[:, : k * m2].reshape(n_s, k, m2)
    means = weeks.mean(axis=2)  # (S, k), centred at (m2 - 1) / 2 + i m2
    mid = means.mean(axis=1)  # level at time (k m2 - 1) / 2
    offset = np.arange(k * m2) - (k * m2 - 1) / 2
    slope = np.zeros(n_s)
    if spec.trend:
        centre = (m2 - 1) / 2 + m2 * np.arange(k)
        tc = centre - centre.mean()
        slope = (means - mid[:, None]) @ tc / (tc @ tc)
        if spec.mult:  # ratios to a line that crosses zero are meaningless: flat there
            slope[np.any(mid[:, None] + slope[:, None] * offset <= 0, axis=1)] = 0.0
    line = mid[:, None] + slope[:, None] * offset
    line = line.reshape(n_s, k, m2)
    prof = (weeks / line if spec.mult else weeks - line).mean(axis=1)  # (S, m2)
    days = prof.reshape(n_s, m2 // m, m)
    s1 = days.mean(axis=1)
    if spec.mult:
        s1 /= s1.mean(axis=1, keepdims=True)
        s2 = (days / s1[:, None, :]).reshape(n_s, m2)
    else:
        s1 -= s1.mean(axis=1, keepdims=True)
        s2 = (days - s1[:, None, :]).reshape(n_s, m2)
    level0 = mid - slope * (k * m2 + 1) / 2  # the line one step before the first sample
    return States(level0, slope, s1, s2)


def _corr(fa: np.ndarray, b: np.ndarray, lags: int) -> np.ndarray:
    """c[j] = sum_u a[u] b[u + j] for j < lags, batched over rows, from ``fa`` =
    conj(rfft(a)) zero-padded past twice the length (numpy.fft)."""
    size = 2 * (fa.shape[1] - 1)
    return np.fft.irfft(fa * np.fft.rfft(b, size), size)[:, :lags]


def _seasonal_gram(fa: np.ndarray, fs: np.ndarray, m: int) -> np.ndarray:
    """(D'D)[j, l] = sum_{u=0}^{T-1-max(j,l)} fs[u] fs[u+|j-l|] for j, l < m.

    That is the full autocorrelation at lag |j-l| (a Toeplitz matrix) minus the part
    that runs past the end of the series. With r = fs reversed, that tail is, for
    j <= l, sum_{i<j} r[i] r[i+l-j] = P[j, l-j], prefix sums of lagged products; the
    skewed index (j, l-j) is a plain strided view of P.
    """
    n_s = fs.shape[0]
    auto = _corr(fa, fs, m)  # (S, m) by lag
    sym = np.concatenate([auto[:, :0:-1], auto], axis=1)  # lags m-1 .. 1, 0 .. m-1
    toeplitz = np.lib.stride_tricks.sliding_window_view(sym, m, axis=1)[:, ::-1]
    r = fs[:, ::-1][:, : 2 * m - 1]
    lagged = r[:, :m, None] * np.lib.stride_tricks.sliding_window_view(r, m, axis=1)
    pre = np.zeros((n_s, m + 1, m))
    np.cumsum(lagged, axis=1, out=pre[:, 1:])
    st = pre.strides
    skew = np.lib.stride_tricks.as_strided(
        pre, shape=(n_s, m, m), strides=(st[0], st[1] - st[2], st[2]), writeable=False
    )
    tail = np.triu(skew)
    tail += np.triu(skew, 1).transpose(0, 2, 1)
    return toeplitz - tail


def _solve(
    e: np.ndarray,
    cols: list[np.ndarray],
    fs: np.ndarray | None,
    scale: np.ndarray | None,
    pin: bool,
) -> np.ndarray:
    """argmin_x |e - D x|^2 for D = [cols | shift(fs, j) * scale_j for j < m], per row.

    ``pin`` adds the constraint sum(s) = 0 (additive: a constant moves freely between
    level and seasonals); otherwise a tiny ridge (multiplicative: a common factor does).
    """
    n_s, n_t = e.shape
    m = 0 if fs is None or scale is None else scale.shape[1]
    if scale is not None and np.all(scale == 1.0):
        scale = None
    k0 = len(cols)
    k = k0 + m
    gram = np.empty((n_s, k, k))
    rhs = np.empty((n_s, k))
    for i, c in enumerate(cols):
        rhs[:, i] = np.einsum("st,st->s", c, e)
        for j, c2 in enumerate(cols):
            gram[:, i, j] = np.einsum("st,st->s", c, c2)
    if m:
        fa = np.conj(np.fft.rfft(fs, 1 << int(np.ceil(np.log2(2 * n_t)))))
        sc = 1.0 if scale is None else scale
        rhs[:, k0:] = _corr(fa, e, m) * sc
        for i, c in enumerate(cols):
            gram[:, i, k0:] = gram[:, k0:, i] = _corr(fa, c, m) * sc
        gram[:, k0:, k0:] = _seasonal_gram(fa, fs, m)
        if scale is not None:
            gram[:, k0:, k0:] *= scale[:, :, None] * scale[:, None, :]
    diag = np.trace(gram, axis1=1, axis2=2) / k
    if pin and m:
        pen = np.zeros(k)
        pen[k0:] = 1.0
        gram += diag[:, None, None] * np.outer(pen, pen)
    else:
        gram += (1e-9 * diag + 1e-300)[:, None, None] * np.eye(k)
    return np.linalg.solve(gram, rhs[..., None])[..., 0]


def least_squares(
    y: np.ndarray,
    spec: Spec,
    alpha: np.ndarray,
    beta: np.ndarray,
    phi: np.ndarray,
    gamma: np.ndarray,
) -> States:
    """SSE-optimal initial states for one parameter set per series (additive, one season).

    e = e0 - D x0, x0 = (level, [trend], s_0..s_{m-1}); column j of the seasonal
    block of D is the phase-0 response delayed by j, so D'D needs only correlations.
    """
    n_s, n_t = y.shape
    m = spec.m
    ext = np.concatenate([y, np.zeros((3, n_t))])  # rows S..S+2: unit responses
    lvl = np.r_[np.zeros(n_s), 1.0, 0.0, 0.0]
    trd = np.r_[np.zeros(n_s), 0.0, 1.0, 0.0]
    sea = np.zeros((n_s + 3, max(m, 1)))
    sea[n_s + 2, 0] = 1.0
    ser = np.stack([np.arange(n_s), *(np.full(n_s, n_s + i) for i in range(3))], axis=1)
    g = gamma[:, None]
    out = hwf.run(
        ext,
        ser,
        alpha,
        beta,
        phi,
        g,
        0.0,
        lvl,
        trd,
        sea if m else None,
        None,
        mult=False,
        fitted=True,
    )
    f = out.fitted.transpose(1, 2, 0)  # (S, 4, T)
    cols = [f[:, 1]] + ([f[:, 2]] if spec.trend else [])
    x = _solve(y - f[:, 0], cols, f[:, 3] if m else None, np.ones((n_s, m)) if m else None, True)
    k0 = len(cols)
    trend = x[:, 1] if spec.trend else np.zeros(n_s)
    return States(x[:, 0], trend, x[:, k0:] if m else None, None)


def _runs(y: np.ndarray, prm: tuple[np.ndarray, ...], xs: np.ndarray, **kw: bool) -> hwf.FilterOut:
    """Multiplicative runs of K candidate state vectors per series, xs (S, K, 2 + m),
    in one batch: columns are the candidates."""
    a, b, p, g, g2 = prm
    n_s, k, _ = xs.shape
    flat = xs.reshape(n_s * k, -1)
    ser = np.arange(n_s * k).reshape(n_s, k)
    return hwf.run(
        np.repeat(y, k, axis=0),
        ser,
        a,
        b,
        p,
        g[:, None],
        g2[:, None],
        flat[:, 0],
        flat[:, 1],
        flat[:, 2:],
        None,
        mult=True,
        **kw,
    )


def _stack(st: States) -> np.ndarray:
    return np.concatenate([st.level[:, None], st.trend[:, None], st.season], axis=1)


def _unstack(x: np.ndarray) -> States:
    return States(x[:, 0].copy(), x[:, 1].copy(), x[:, 2:].copy(), None)


def gauss_newton(y: np.ndarray, spec: Spec, prm: tuple[np.ndarray, ...], st: States) -> States:
    """One Gauss-Newton step on the multiplicative model's initial states, kept per
    series only where it lowers the SSE (half and quarter steps are tried too).

    The Jacobian is exact for level and trend (finite differences) and approximated
    for the seasonal block: the response to phase j's state is taken as phase 0's,
    delayed by j and scaled by the one-step level at j over that at 0 (exact when the
    level is flat; additive-like structure, so the same correlation solve applies).
    """
    n_s = len(y)
    x = _stack(st)
    # finite-difference steps: level and trend relative to the data's size, the
    # seasonal factor (about 1) absolutely
    h = 1e-6 * np.stack([np.abs(y).mean(axis=1)] * 2 + [np.ones(n_s)], axis=1)  # (S, 3)
    xs = np.repeat(x[:, None, :], 4, axis=1)
    for i in range(3):  # perturb level, trend, phase-0 seasonal
        xs[:, i + 1, i] += h[:, i]
    out = _runs(y, prm, xs, fitted=True, levels=True)
    f = out.fitted.transpose(1, 2, 0)  # (S, 4, T)
    d = (f[:, 1:] - f[:, :1]) / h[:, :, None]
    q = out.levels[: spec.m, :, 0].T  # (S, m) one-step levels over the first season
    with np.errstate(all="ignore"):
        scale = np.where(q[:, :1] != 0, q / q[:, :1], 1.0)
    cols = [d[:, 0]] + ([d[:, 1]] if spec.trend else [])
    step = _solve(y - f[:, 0], cols, d[:, 2], scale, False)
    if not spec.trend:
        step = np.concatenate([step[:, :1], np.zeros((n_s, 1)), step[:, 1:]], axis=1)
    tries = x[:, None, :] + np.array([1.0, 0.5, 0.25])[None, :, None] * step[:, None, :]
    sse = _runs(y, prm, tries).sse
    sse[np.any(tries[..., 2:] <= 0, axis=2)] = np.inf
    i = np.argmin(sse, axis=1)
    take = sse[np.arange(n_s), i] < out.sse[:, 0]
    return _unstack(np.where(take[:, None], tries[np.arange(n_s), i], x))


def simple(y: np.ndarray, spec: Spec) -> States:
    """statsmodels' "simple" states (FPP 3rd ed. §7.6), for seasons too short for the
    heuristic: the first season's mean, its per-phase deviations, mean seasonal slope."""
    m = spec.m
    if not m:
        level = y[:, 0].copy()
        trend = y[:, 1] - y[:, 0] if spec.trend else np.zeros(len(y))
        return States(level, trend, None, None)
    level = y[:, :m].mean(axis=1)
    trend = ((y[:, m : 2 * m] - y[:, :m]) / m).mean(axis=1) if spec.trend else np.zeros(len(y))
    season = y[:, :m] / level[:, None] if spec.mult else y[:, :m] - level[:, None]
    return States(level, trend, season, None)


def frozen_level_seasonals(
    y: np.ndarray, spec: Spec, prm: tuple[np.ndarray, ...], st: States, passes: int = 2
) -> States:
    """Multiplicative seasonal states by least squares with the level path held fixed.

    With the one-step levels q_t frozen at those of the current states, the fitted
    value at phase j, season k is q (w_k s0_j + c_k) with w_k = (1 - gamma)^k and c_k
    the smoothed y/q of earlier seasons, so each s0_j is a one-variable least-squares
    problem. The level does react to s0 (through y / s), so this is repeated, and a
    pass is kept only where it lowers the SSE (block coordinate descent, never worse).
    """
    g = prm[3][:, None]
    n_s, n_t = y.shape
    m = spec.m
    k = -(-n_t // m)
    yy = np.zeros((n_s, k * m))
    yy[:, :n_t] = y
    ys = yy.reshape(n_s, k, m)
    x = _stack(st)
    out = _runs(y, prm, x[:, None], levels=True)
    lv, sse = out.levels[:, :, 0].T, out.sse[:, 0]
    for _ in range(passes):
        q = np.zeros((n_s, k * m))
        q[:, :n_t] = lv
        qs = q.reshape(n_s, k, m)
        with np.errstate(all="ignore"):
            ratio = np.where(qs != 0, ys / qs, 0.0)
        c = np.zeros_like(qs)
        w = np.ones_like(qs)
        for i in range(1, k):
            c[:, i] = (1.0 - g) * c[:, i - 1] + g * ratio[:, i - 1]
            w[:, i] = (1.0 - g) * w[:, i - 1]
        qw = qs * w  # zero where padded (q = 0 there)
        den = np.einsum("skm,skm->sm", qw, qw)
        num = np.einsum("skm,skm->sm", qw, ys - qs * c)
        xn = x.copy()
        with np.errstate(all="ignore"):
            xn[:, 2:] = np.where(den > 0, num / den, x[:, 2:])
        ok = np.all(np.isfinite(xn[:, 2:]) & (xn[:, 2:] > 0), axis=1)
        xn[~ok] = x[~ok]
        out = _runs(y, prm, xn[:, None], levels=True)
        take = out.sse[:, 0] < sse
        x = np.where(take[:, None], xn, x)
        lv = np.where(take[:, None], out.levels[:, :, 0].T, lv)
        sse = np.where(take, out.sse[:, 0], sse)
    return _unstack(x)
