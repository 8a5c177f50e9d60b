"""EWMA smoothing with a ±k·σ band, for short-term signals that must ignore blips.

The plain exponentially weighted moving average is the control-chart statistic of
Roberts (1959), as set out in the NIST/SEMATECH e-Handbook of Statistical Methods,
section 6.3.2.4 "EWMA Control Charts":

    z_t   = λ·x_t + (1 − λ)·z_{t−1}
    σ_z²  = σ²·λ/(2 − λ)·[1 − (1 − λ)^{2t}]      (→ σ²·λ/(2 − λ) for large t)
    limits: μ₀ ± L·σ_z

A plain EWMA lets one spike drag the level for many steps and reacts to a real level
change only gradually. ``robust_ewma`` fixes both: an observation outside the band
``z_{t−1} ± k·σ`` updates the level only as far as the band edge (Huber-style
clipping), and after ``m`` consecutive out-of-band points on the same side the new
level is accepted at once (their median), because a sustained change is not noise.
Everything runs across the batch (N series) with one Python step per time index.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from floorcast.core.forecasting.base import as_batch
from floorcast.core.forecasting.preprocess import MAD_SCALE
from floorcast.errors import InputError

#: NIST 6.3.2.4 notes λ is usually set between 0.2 and 0.3; 0.3 reacts faster.
DEFAULT_LAMBDA = 0.3
#: Band half-width in σ; 3 is the classic control-chart choice (NIST 6.3.2.4).
DEFAULT_K = 3.0
#: Consecutive same-side out-of-band points that mean "the level moved" (common
#: practice, no source): 3 × 5 min reacts within a quarter of an hour.
DEFAULT_M = 3


def _check_lambda(lam: float) -> None:
    if not 0 < lam <= 1:
        raise InputError(f"EWMA weight λ must be in (0, 1], got {lam}")


def _row(v: float | np.ndarray | None, n: int, default: np.ndarray) -> np.ndarray:
    if v is None:
        return default.astype(np.float64, copy=True)
    return np.broadcast_to(np.asarray(v, dtype=np.float64), (n,)).copy()


def ewma(x: np.ndarray, lam: float, z0: float | np.ndarray | None = None) -> np.ndarray:
    """z_t for every t. With ``z0`` (the chart's target μ₀) the first output is
    λ·x₀ + (1 − λ)·z0, as in the handbook; without it the recursion starts at x₀,
    as pandas' ``ewm(alpha=λ, adjust=False)`` does."""
    _check_lambda(lam)
    a = as_batch(x)
    out = np.empty_like(a)
    if z0 is None:
        z, first = a[:, 0].copy(), 1
        out[:, 0] = z
    else:
        z, first = _row(z0, a.shape[0], a[:, 0]), 0
    for t in range(first, a.shape[1]):
        z = lam * a[:, t] + (1 - lam) * z
        out[:, t] = z
    return out


def ewma_sigma(
    sigma: float | np.ndarray, lam: float, t: int | np.ndarray | None = None
) -> np.ndarray:
    """σ_z after ``t`` observations (t = 1, 2, ...), or the asymptote when ``t`` is None."""
    _check_lambda(lam)
    s = np.asarray(sigma, dtype=np.float64)
    ratio = lam / (2 - lam)
    if t is None:
        return s * math.sqrt(ratio)
    return s * np.sqrt(ratio * (1 - (1 - lam) ** (2 * np.asarray(t, dtype=np.float64))))


def control_limits(
    mu0: float | np.ndarray,
    sigma: float | np.ndarray,
    lam: float,
    L: float = DEFAULT_K,  # the handbook's name
    t: int | np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """(LCL, UCL) = μ₀ ∓ L·σ_z, time-varying when ``t`` is given."""
    half = L * ewma_sigma(sigma, lam, t)
    mu = np.asarray(mu0, dtype=np.float64)
    return mu - half, mu + half


def noise_sigma(x: np.ndarray) -> np.ndarray:
    """Per-series noise σ from the MAD of first differences / √2: a level change or a
    trend moves only a few differences, so it barely inflates the estimate."""
    a = as_batch(x)
    if a.shape[1] < 2:
        return np.zeros(a.shape[0])
    d = np.diff(a, axis=1)
    med = np.median(d, axis=1, keepdims=True)
    return MAD_SCALE * np.median(np.abs(d - med), axis=1) / math.sqrt(2)


@dataclass(frozen=True, eq=False)
class Smoothed:
    """The robust level and the band each observation was judged against."""

    level: np.ndarray  # (N, T) z_t after seeing x_t
    lower: np.ndarray  # (N, T) z_{t−1} − k·σ
    upper: np.ndarray  # (N, T) z_{t−1} + k·σ
    rejected: np.ndarray  # (N, T) bool: x_t was outside the band and clipped
    shifted: np.ndarray  # (N, T) bool: a new level was accepted at t
    sigma: np.ndarray  # (N,) the σ used


def robust_ewma(
    x: np.ndarray,
    *,
    lam: float = DEFAULT_LAMBDA,
    k: float = DEFAULT_K,
    m: int = DEFAULT_M,
    sigma: float | np.ndarray | None = None,
    z0: float | np.ndarray | None = None,
) -> Smoothed:
    """EWMA that clips isolated spikes and jumps to a sustained new level.

    ``sigma`` is the observation noise σ (per series or one for all); by default it
    is estimated with ``noise_sigma``. ``k = inf`` turns clipping off and gives the
    plain ``ewma``. A series with σ = 0 (constant so far) treats any change as out of
    band, so a step is followed after ``m`` points and a lone blip is ignored.
    """
    _check_lambda(lam)
    if not k > 0:
        raise InputError(f"band half-width k must be > 0, got {k}")
    if m < 1:
        raise InputError(f"level-change run length m must be at least 1, got {m}")
    a = as_batch(x)
    n, t_len = a.shape
    s = _row(sigma, n, noise_sigma(a) if sigma is None else np.zeros(n))
    if np.any(s < 0) or not np.all(np.isfinite(s)):
        raise InputError("EWMA noise σ must be finite and ≥ 0")
    half = k * s if math.isfinite(k) else np.full(n, np.inf)
    level = np.empty_like(a)
    lower, upper = np.empty_like(a), np.empty_like(a)
    rejected = np.zeros(a.shape, dtype=bool)
    shifted = np.zeros(a.shape, dtype=bool)
    if z0 is None:
        z, first = a[:, 0].copy(), 1
        level[:, 0], lower[:, 0], upper[:, 0] = z, z - half, z + half
    else:
        z, first = _row(z0, n, a[:, 0]), 0
    run = np.zeros(n, dtype=np.int64)
    side = np.zeros(n)
    for t in range(first, t_len):
        xt = a[:, t]
        lo, hi = z - half, z + half
        lower[:, t], upper[:, t] = lo, hi
        out = (xt < lo) | (xt > hi)
        sgn = np.sign(xt - z)
        run = np.where(out, np.where(sgn == side, run + 1, 1), 0)
        side = np.where(out, sgn, 0.0)
        z = lam * np.clip(xt, lo, hi) + (1 - lam) * z
        jump = run >= m
        if jump.any():
            recent = np.median(a[:, max(t - m + 1, 0) : t + 1], axis=1)
            z = np.where(jump, recent, z)
            run = np.where(jump, 0, run)
            side = np.where(jump, 0.0, side)
            shifted[:, t] = jump
        rejected[:, t] = out & ~jump
        level[:, t] = z
    return Smoothed(
        level=level, lower=lower, upper=upper, rejected=rejected, shifted=shifted, sigma=s
    )
