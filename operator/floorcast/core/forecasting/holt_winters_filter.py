"""The Holt-Winters recursions, run for many (series, parameter candidate) pairs at once.

Why chunks instead of a plain loop over time: a numpy loop over 4032 steps pays
~1 µs of call overhead per operation per step, which alone would eat the whole time
budget of a fit. The recursions have a structure that lets us take ``ell`` steps per
numpy call instead of one:

* a seasonal state is read ``m`` steps after it was written, so inside any stretch of
  ``ell <= m`` steps every seasonal value used is already known;
* given those seasonal values, the level/trend pair is a *linear, time-invariant*
  2-state filter of the seasonally adjusted input ``z`` (``y - s`` additive, ``y / s``
  multiplicative): ``x_t = A x_{t-1} + g z_t``, one-step level ``q_t = c x_{t-1}``.

So a stretch of ``ell`` one-step levels plus the closing state is one matrix product
``[q_0..q_{ell-1}, l, b] = W [z_0..z_{ell-1}, l_0, b_0]`` with ``W`` built from powers
of ``A`` (a lower-triangular Toeplitz block of impulse responses ``c A^k g``, the
free responses ``c A^k``, and ``A^ell``). That is algebraically the same recursion
as statsmodels' ``ExponentialSmoothing``, only re-associated (it agrees to rounding,
~1e-15 relative; the tests require 1e-6).

Batch layout: runs are indexed (G, C). The ``G`` groups each share one
(alpha, beta, phi) and hence one ``W``; the ``C`` columns inside a group differ in
the seasonal gains and/or the series (``ser[g, c]`` says which row of ``y``). Arrays
are time-major, ``(time or phase, G, C)``, so each elementwise step is one contiguous
block and the matrix product reads it in place.

Equations (error-correction form of Hyndman & Athanasopoulos, *Forecasting:
Principles and Practice*, 2nd ed., §7.3 and §7.4 — the form statsmodels implements),
with q = l_{t-1} + phi b_{t-1} and statsmodels' parameter names:
    additive:        yhat = q + s1 + s2,     e = y - yhat
                     l = q + alpha e,        b = phi b + alpha beta e
                     s1 += gamma e,          s2 += gamma2 e
    multiplicative:  yhat = q s1 s2,         z = y / (s1 s2)
                     l = q + alpha (z - q),  b = phi b + alpha beta (z - q)
                     s1 = (1 - gamma) s1 + gamma y / (q s2)
                     s2 = (1 - gamma2) s2 + gamma2 y / (q s1)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Spec:
    """Model structure: season lengths (0 = none), seasonal kind, trend, damping.
    Shared by the filter, the initial-state and the search modules."""

    m: int
    m2: int
    mult: bool
    trend: bool
    damped: bool

    @property
    def n_gamma(self) -> int:
        return (self.m > 0) + (self.m2 > 0)


@dataclass
class States:
    """Initial states per series: level, trend (S,), seasons (S, m) / (S, m2)."""

    level: np.ndarray
    trend: np.ndarray
    season: np.ndarray | None
    season2: np.ndarray | None

    def rows(self, idx: np.ndarray) -> States:
        def pick(a: np.ndarray | None) -> np.ndarray | None:
            return None if a is None else a[idx]

        return States(self.level[idx], self.trend[idx], pick(self.season), pick(self.season2))


@dataclass
class FilterOut:
    """End states and in-sample error of every (group, column) run."""

    sse: np.ndarray  # (G, C)
    level: np.ndarray  # (G, C)
    trend: np.ndarray  # (G, C)
    season: np.ndarray | None  # (m, G, C) indexed by time mod m
    season2: np.ndarray | None  # (m2, G, C) indexed by time mod m2
    fitted: np.ndarray | None  # (T, G, C) one-step-ahead fitted values
    levels: np.ndarray | None = None  # (T, G, C) one-step level l + phi b before each y


def _powers(a: np.ndarray, n: int) -> np.ndarray:
    """A^0 .. A^n for a stack of 2x2 matrices, by doubling (log2 n matmul calls)."""
    out = np.empty((n + 1, *a.shape))
    out[0] = np.eye(2)
    if n:
        out[1] = a
    k = 2
    while k <= n:
        step = min(k, n + 1 - k)
        np.matmul(out[:step], out[k - 1] @ a, out=out[k : k + step])
        k += step
    return out


def chunk_matrix(alpha: np.ndarray, beta: np.ndarray, phi: np.ndarray, ell: int) -> np.ndarray:
    """W^T of shape (G, ell+2, ell+2): row vector [z, l, b] @ W^T = [q, l_end, b_end]."""
    n_g = alpha.shape[0]
    bb = alpha * beta
    a = np.empty((n_g, 2, 2))
    a[:, 0, 0] = 1.0 - alpha
    a[:, 0, 1] = (1.0 - alpha) * phi
    a[:, 1, 0] = -bb
    a[:, 1, 1] = phi * (1.0 - bb)
    pw = _powers(a, ell)  # (ell+1, G, 2, 2)
    c_a = pw[:, :, 0, :] + phi[None, :, None] * pw[:, :, 1, :]  # c A^n, (ell+1, G, 2)
    a_g = pw[..., 0] * alpha[:, None] + pw[..., 1] * bb[:, None]  # A^n g, (ell+1, G, 2)
    h = c_a[..., 0] * alpha + c_a[..., 1] * bb  # impulse response c A^n g, (ell+1, G)
    wt = np.empty((n_g, ell + 2, ell + 2))
    # wt[g, j, i] = h[i - j - 1] for i > j, else 0: rows are windows of [0]*ell + h
    x = np.zeros((n_g, 2 * ell))
    x[:, ell:] = h[:ell].T
    win = np.lib.stride_tricks.sliding_window_view(x, ell, axis=1)  # (G, ell+1, ell)
    wt[:, :ell, :ell] = win[:, ell - 1 :: -1] if ell > 1 else win[:, :1]
    wt[:, ell:, :ell] = c_a[:ell].transpose(1, 2, 0)
    wt[:, :ell, ell:] = a_g[ell - 1 :: -1][:ell].transpose(1, 0, 2)
    wt[:, ell:, ell:] = pw[ell].transpose(0, 2, 1)
    return wt


def chunk_length(n_cols: int, m: int) -> int:
    """Steps per matrix product: long chunks for few columns (call overhead dominates),
    short for many (the O(ell) arithmetic per step dominates). Thresholds measured on
    the 2-core dev machine (4032 steps, season 288). A divisor of the season when one
    is close, so chunks rarely need splitting at a season boundary."""
    target = 96 if n_cols <= 8 else 48 if n_cols <= 64 else 32 if n_cols <= 256 else 16
    if m:
        target = min(target, m)
        for d in range(target, max(target // 2, 1) - 1, -1):
            if m % d == 0:
                return d
    return target


def _take(a: np.ndarray, ser: np.ndarray, shape: tuple[int, ...]) -> np.ndarray:
    """Per-column copy of per-series values (S, ...) as (..., G, C)."""
    a = np.moveaxis(a, 0, -1)  # (..., S)
    out = a[..., :1] if a.shape[-1] == 1 else np.take(a, ser, axis=-1)
    if out.ndim == a.ndim:  # single series: (..., 1) -> broadcast
        out = out[..., None]
    return np.array(np.broadcast_to(out, (*a.shape[:-1], *shape)), dtype=np.float64)


def run(
    y: np.ndarray,
    ser: np.ndarray,
    alpha: np.ndarray,
    beta: np.ndarray,
    phi: np.ndarray,
    gamma: np.ndarray,
    gamma2: np.ndarray,
    level0: np.ndarray,
    trend0: np.ndarray,
    season0: np.ndarray | None,
    season20: np.ndarray | None,
    *,
    mult: bool,
    fitted: bool = False,
    levels: bool = False,
) -> FilterOut:
    """Run the recursions over all of ``y`` (S, T) for every (group, column).

    ``ser`` (broadcastable to (G, C)) picks the series of each column; ``alpha``,
    ``beta``, ``phi`` are (G,); ``gamma``/``gamma2`` broadcast to (G, C); initial
    states are per series: ``level0``/``trend0`` (S,), ``season0`` (S, m),
    ``season20`` (S, m2) or None. No trend is ``beta = phi = trend0 = 0``. Returned
    arrays are time-major (see the module docstring).
    """
    n_t = y.shape[1]
    g_n = alpha.shape[0]
    ser = np.asarray(ser)
    shape = np.broadcast_shapes(ser.shape, np.shape(gamma), np.shape(gamma2), (g_n, 1))
    m = 0 if season0 is None else season0.shape[1]
    m2 = 0 if season20 is None else season20.shape[1]
    s1 = _take(season0, ser, shape) if m else None  # (m, G, C)
    s2 = _take(season20, ser, shape) if m2 else None
    gam = np.broadcast_to(gamma, shape)
    gam2 = np.broadcast_to(gamma2, shape)
    ell_max = min(chunk_length(shape[0] * shape[1], m), n_t)
    buf = np.empty((ell_max + 2, *shape))
    buf[ell_max] = _take(level0, ser, shape)
    buf[ell_max + 1] = _take(trend0, ser, shape)
    res = np.empty_like(buf)
    acc = np.zeros((ell_max, *shape))
    out = np.empty((n_t, *shape)) if fitted else None
    lv = np.empty((n_t, *shape)) if levels else None
    single = y.shape[0] == 1
    yt = y.T[:, :, None] if single else np.ascontiguousarray(y.T)
    mats: dict[int, np.ndarray] = {}
    t0 = 0
    with np.errstate(all="ignore"):
        while t0 < n_t:
            p1 = t0 % m if m else 0
            p2 = t0 % m2 if m2 else 0
            ell = min(ell_max, n_t - t0, (m - p1) if m else n_t, (m2 - p2) if m2 else n_t)
            w = mats.get(ell)
            if w is None:
                w = mats[ell] = chunk_matrix(alpha, beta, phi, ell).transpose(0, 2, 1).copy()
            if ell == ell_max:
                v, r = buf, res
            else:
                v = np.concatenate([buf[:ell], buf[ell_max:]])
                r = np.empty_like(v)
            yc = yt[t0 : t0 + ell] if single else np.take(yt[t0 : t0 + ell], ser, axis=1)
            z = v[:ell]
            sv = s1[p1 : p1 + ell] if m else None
            sv2 = s2[p2 : p2 + ell] if m2 else None
            # z: the seasonally adjusted input the level/trend filter sees
            if not m:
                z[...] = yc
            elif mult:
                np.divide(yc, sv if sv2 is None else sv * sv2, out=z)
            else:
                np.subtract(yc, sv, out=z)
                if sv2 is not None:
                    z -= sv2
            np.matmul(w, v.transpose(1, 0, 2), out=r.transpose(1, 0, 2))
            q = r[:ell]
            if lv is not None:
                lv[t0 : t0 + ell] = q
            if mult and m:
                seas = sv if sv2 is None else sv * sv2
                yhat = q * seas
                if out is not None:
                    out[t0 : t0 + ell] = yhat
                err = np.subtract(yc, yhat, out=yhat)
                if sv2 is None:  # s += gamma (y / q - s), i.e. (1 - gamma) s + gamma y / q
                    upd = np.divide(yc, q)
                    upd -= sv
                    upd *= gam
                    sv += upd
                else:
                    old1 = sv.copy()
                    sv *= 1.0 - gam
                    sv += gam * yc / (q * sv2)
                    sv2 *= 1.0 - gam2
                    sv2 += gam2 * yc / (q * old1)
            else:
                err = np.subtract(z, q, out=q)
                if out is not None:
                    np.subtract(yc, err, out=out[t0 : t0 + ell])
                if m:
                    sv += gam * err
                if m2:
                    sv2 += gam2 * err
            np.square(err, out=err)
            acc[:ell] += err
            buf[ell_max:] = r[ell:]
            t0 += ell
        sse = acc.sum(axis=0)
    sse[~np.isfinite(sse)] = np.inf
    return FilterOut(
        sse=sse,
        level=buf[ell_max].copy(),
        trend=buf[ell_max + 1].copy(),
        season=s1,
        season2=s2,
        fitted=out,
        levels=lv,
    )
