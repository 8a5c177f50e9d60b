"""Fourier extrapolation: robust trend plus the few harmonics that carry the season.

Load with daily and weekly rhythms is, to a good approximation, a slow trend plus a
handful of sinusoids at multiples of 1/season. One FFT per series finds them, and a
sum of sinusoids extends into the future without recursion, so the whole batch is a
few FFTs and matrix products: thousands of workloads in seconds.

Steps, all vectorized over the batch:

1. **Whole seasons.** With ``season > 0`` only the last ``floor(T / season)`` whole
   seasons are used, so every harmonic of the season falls exactly on an FFT bin
   (no leakage between bins).
2. **Robust trend.** Theil–Sen (median of pairwise slopes, Theil 1950 / Sen 1968) on
   block means: blocks are one season long when there are enough of them, so the
   season averages out of each block, and the median ignores a few bad blocks (an
   incident day) that would tilt a least-squares line.
3. **Harmonic choice.** Periodogram of the detrended series. Candidates are the
   multiples of the season's fundamental (``season > 0``) or every bin with at least
   two cycles in the window (``season = 0``), and never a period shorter than
   ``min_period`` steps (the low-pass cut: faster wiggles are noise for a replica
   floor that is held for many minutes anyway). Either the ``harmonics`` strongest
   candidates by amplitude are kept, or (``harmonics=None``) every candidate whose
   power clears the white-noise periodogram's exponential tail at a 1 % false-alarm
   rate across all candidates (power / noise mean ~ Exp(1) at Fourier frequencies;
   Brockwell & Davis, *Time Series: Theory and Methods*, §10.3, from memory), with the
   noise mean estimated from the median of the non-candidate bins.
4. **Trend and harmonics together.** A line is nearly collinear with low harmonics, so
   the slope is re-estimated with the kept harmonics projected out of both the data
   and the time axis (still Theil–Sen on block means, done in the frequency domain).
   When the data really are a line plus those harmonics this recovers both exactly.
5. **Extrapolation.** The kept harmonics are periodic in the window, so the future is
   the inverse FFT read at ``h mod n``, plus intercept + slope × time.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from floorcast.core.forecasting.base import ForecastError, as_batch, require_length

#: Shortest period kept, in steps (30 min at 5-minute steps).
DEFAULT_MIN_PERIOD = 6
#: Upper bound on automatically chosen harmonics; with a season, 64 is ample for a
#: weekly profile with daily detail; without one, only a few peaks are believable.
MAX_AUTO_HARMONICS = 64
MAX_AUTO_PEAKS = 8
#: Family-wise false-alarm rate for keeping a pure-noise candidate.
FALSE_ALARM = 0.01
#: Shortest history without a season (steps); shorter cannot separate trend from cycle.
MIN_LENGTH_NO_SEASON = 32
#: Trend blocks: at most this many (Theil–Sen is quadratic in blocks), at least this.
MAX_TREND_BLOCKS = 32
MIN_TREND_BLOCKS = 6
#: Series per chunk: bounds the complex intermediates to ~100 MB at 4032 steps.
CHUNK = 2048


def forecast(
    y: np.ndarray,
    *,
    season: int,
    horizon: int,
    harmonics: int | None = None,
    min_period: int = DEFAULT_MIN_PERIOD,
) -> np.ndarray:
    """Point forecasts (N, horizon): robust line plus the selected harmonics.

    ``harmonics`` is how many harmonics to keep per series (None: as many as are
    significant, see the module docstring). The history must hold two whole seasons
    (``season > 0``) or ``MIN_LENGTH_NO_SEASON`` steps.
    """
    a = as_batch(y)
    for name, value, low in (
        ("season", season, 0),
        ("horizon", horizon, 0),
        ("min_period", min_period, 2),
    ):
        if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < low:
            raise ForecastError(f"{name} must be an integer >= {low}, got {value!r}")
    if harmonics is not None and (not isinstance(harmonics, int | np.integer) or harmonics < 0):
        raise ForecastError(f"harmonics must be None or an integer >= 0, got {harmonics!r}")

    t = a.shape[1]
    if season > 0:
        require_length(a, 2 * season, f"the Fourier forecast with a season of {season} steps")
        n = (t // season) * season
    else:
        require_length(a, MIN_LENGTH_NO_SEASON, "the Fourier forecast without a season")
        n = t
    plan = _plan(n, season, min_period)
    x = a[:, t - n :]
    out = np.empty((a.shape[0], horizon))
    for s in range(0, a.shape[0], CHUNK):
        out[s : s + CHUNK] = _forecast_chunk(x[s : s + CHUNK], plan, horizon, harmonics)
    return out


@dataclass(frozen=True)
class _Plan:
    """Everything that depends only on the window, shared by every series."""

    n: int
    cand: np.ndarray  # candidate bins (int)
    other: np.ndarray  # bins 1..Nyquist-1 that are not candidates (noise floor)
    ramp: np.ndarray  # rfft of 0..n-1 (complex, all bins)
    block_start: int  # first sample used for the trend
    blocks: int
    block_len: int
    block_t: np.ndarray  # mean time of each block
    block_harm: np.ndarray  # (blocks, candidates) complex: block mean of exp(2πikt/n)
    auto_cap: int


def _plan(n: int, season: int, min_period: int) -> _Plan:
    half = n // 2
    k = np.arange(1, half + (n % 2))  # 1 .. last bin below Nyquist
    low_pass = k * min_period <= n
    on_season = k % (n // season) == 0 if season > 0 else k >= 2
    cand = k[low_pass & on_season]
    other = k[~on_season] if season > 0 else cand

    if season > 0 and n // season >= MIN_TREND_BLOCKS:
        block_len = season * -(-(n // season) // MAX_TREND_BLOCKS)
    else:
        block_len = max(1, n // (2 * MIN_TREND_BLOCKS + 4))
    blocks = min(n // block_len, MAX_TREND_BLOCKS)
    block_start = n - blocks * block_len
    starts = block_start + block_len * np.arange(blocks)
    block_t = starts + (block_len - 1) / 2.0

    # Mean of exp(2πi k t / n) over t in [s, s+L): geometric series, exact.
    w = 2j * np.pi * cand / n
    z = np.exp(w)
    geo = np.where(
        np.abs(z - 1) > 1e-12,
        (np.exp(w * block_len) - 1) / np.where(np.abs(z - 1) > 1e-12, z - 1, 1) / block_len,
        1.0,
    )
    block_harm = np.exp(np.outer(starts, w)) * geo[None, :]

    ramp = np.fft.rfft(np.arange(n, dtype=np.float64))
    cap = MAX_AUTO_HARMONICS if season > 0 else MAX_AUTO_PEAKS
    return _Plan(n, cand, other, ramp, block_start, blocks, block_len, block_t, block_harm, cap)


def _forecast_chunk(x: np.ndarray, plan: _Plan, horizon: int, harmonics: int | None) -> np.ndarray:
    m, n = x.shape
    spec = np.fft.rfft(x, axis=1)
    ramp_c = plan.ramp[plan.cand]
    spec_c = spec[:, plan.cand]
    block_y = x[:, plan.block_start :].reshape(m, plan.blocks, plan.block_len).mean(axis=2)

    # Stage A: a robust line through block means, only to see the spectrum clearly.
    slope0 = _theil_sen(block_y, np.broadcast_to(plan.block_t, block_y.shape), plan.block_len)
    slope0 = np.where(np.isfinite(slope0), slope0, 0.0)
    detr_c = spec_c - slope0[:, None] * ramp_c[None, :]
    power = detr_c.real**2 + detr_c.imag**2
    keep = _select(power, spec, slope0, plan, harmonics)

    # Stage B: slope and intercept with the kept harmonics projected out of data and time.
    proj_y = (2.0 / n) * ((spec_c * keep) @ plan.block_harm.T).real
    proj_t = (2.0 / n) * ((ramp_c[None, :] * keep) @ plan.block_harm.T).real
    u = block_y - proj_y
    v = plan.block_t[None, :] - proj_t
    slope = _theil_sen(u, v, plan.block_len)
    slope = np.where(np.isfinite(slope), slope, slope0)
    intercept = np.median(u - slope[:, None] * v, axis=1)

    coef = np.zeros_like(spec)
    coef[:, plan.cand] = (spec_c - slope[:, None] * ramp_c[None, :]) * keep
    cycle = np.fft.irfft(coef, n=n, axis=1)
    h = np.arange(horizon)
    return intercept[:, None] + slope[:, None] * (n + h)[None, :] + cycle[:, h % n]


def _select(
    power: np.ndarray, spec: np.ndarray, slope: np.ndarray, plan: _Plan, harmonics: int | None
) -> np.ndarray:
    """Boolean (m, candidates): which harmonics each series keeps."""
    m, c = power.shape
    if c == 0:
        return np.zeros((m, 0), dtype=bool)
    if harmonics is None:
        noise = spec[:, plan.other] - slope[:, None] * plan.ramp[plan.other][None, :]
        noise_mean = np.median(noise.real**2 + noise.imag**2, axis=1) / np.log(2.0)
        threshold = noise_mean * np.log(c / FALSE_ALARM)
        # Amplitudes below a millionth of the strongest are rounding error, not signal.
        floor = 1e-12 * power.max(axis=1)
        keep = power > np.maximum(threshold, floor)[:, None]
        cap = plan.auto_cap
    else:
        keep = np.ones((m, c), dtype=bool)
        cap = harmonics
    if cap < c:
        order = np.argpartition(-power, cap - 1, axis=1) if cap > 0 else None
        top = np.zeros((m, c), dtype=bool)
        if order is not None:
            np.put_along_axis(top, order[:, :cap], True, axis=1)
        keep &= top
    return keep


def _theil_sen(u: np.ndarray, v: np.ndarray, scale: float) -> np.ndarray:
    """Median pairwise slope per row; NaN where no pair has distinct abscissae."""
    i, j = np.triu_indices(u.shape[1], 1)
    du = u[:, j] - u[:, i]
    dv = v[:, j] - v[:, i]
    ok = np.abs(dv) > 1e-9 * scale
    if ok.all():
        return np.median(du / dv, axis=1)
    slopes = np.where(ok, du / np.where(ok, dv, 1.0), np.nan)
    none = ~ok.any(axis=1)
    slopes[none] = 0.0
    out = np.nanmedian(slopes, axis=1)
    out[none] = np.nan
    return out
