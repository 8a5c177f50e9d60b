"""Find daily and weekly rhythms in load history without being told they are there.

``--season auto`` needs to know whether a series repeats every day, every week, or not
at all; guessing a season that is not there makes seasonal methods copy noise forward.
A candidate period P (in steps) counts as present only when two independent pieces of
evidence agree:

1. **Autocorrelation.** The sample ACF at lag P (biased estimator, as
   ``statsmodels.tsa.stattools.acf`` computes by default) exceeds two white-noise
   standard errors. Under white noise sample autocorrelations are approximately
   N(0, 1/T) (Bartlett 1946; Box, Jenkins & Reinsel, *Time Series Analysis*, §2.1.6;
   Brockwell & Davis, *Time Series: Theory and Methods*, Thm 7.2.2 — all from memory),
   hence the familiar 2/sqrt(T); at lags that are a large fraction of T we use the
   finite-sample variance (T - P)/(T (T + 2)) behind the Ljung–Box statistic, which at
   the weekly lag of a two-week history is half of Bartlett's. Only a positive excess
   counts: a season means "similar one period later".
2. **Periodogram peak.** In the last whole number of periods (so P's harmonics sit
   exactly on FFT bins), some harmonic m·(1/P), m = 1..``max_harmonics``, has power at
   least ``peak_ratio`` times the mean power of its non-harmonic neighbours (within
   ``BACKGROUND_HALF_WIDTH`` bins). Under white noise that ratio is F(2, 2b)-distributed
   for b background bins (periodogram ordinates are independent exponentials), so with
   b = 9..16 and the default ratio 15 the tail is 2.5e-5..1.5e-4 per harmonic (the
   tests check this against scipy). The *local* background, after AR(1) prewhitening,
   is what makes this robust to red noise: a random walk has high autocorrelation at
   every lag, which alone would pass test 1, but no local spectral peaks.

Each candidate is tested on the last whole number of its periods, detrended by the line
through the cycle means (a line through the raw samples would absorb part of the
pattern). Candidates are tested shortest first; when a shorter period Q dividing P was
found in a series, Q's mean profile is removed before testing P, because a daily pattern
alone already makes the series similar one week later — the weekly test must find
something beyond the daily shape (weekday versus weekend); the slightly negative
autocorrelation that removal induces in noise is added back. Harmonics of the other
candidates are never counted as peaks nor as background.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from floorcast.core.forecasting.base import ForecastError, as_batch, require_length

DAY = 86_400
WEEK = 604_800
#: Minimum peak-to-local-background power ratio (see module docstring).
PEAK_RATIO = 15.0
#: Harmonics of a candidate examined for a peak (12 of a day: down to 2-hour detail).
MAX_HARMONICS = 12
#: Half-width, in FFT bins, of the neighbourhood the background power comes from.
BACKGROUND_HALF_WIDTH = 16


@dataclass(frozen=True)
class PeriodResult:
    """Per series and candidate: the evidence, and whether the period is present."""

    #: candidate periods in steps, ascending (after rounding seconds to steps)
    candidates: tuple[int, ...]
    #: whether the history holds the two whole periods a candidate needs
    testable: tuple[bool, ...]
    #: (N, C) autocorrelation at each candidate lag of the tested residual, with the
    #: bias a removed shorter profile induces added back (0 where untestable)
    acf: np.ndarray
    #: the autocorrelation bound used for each candidate (0 where untestable)
    acf_bound: tuple[float, ...]
    #: (N, C) strongest harmonic's power over its local background (0 where untestable)
    peak_ratio: np.ndarray
    #: (N, C) bool
    found: np.ndarray

    def periods(self, row: int = 0) -> list[int]:
        """Periods (steps) present in series ``row``, ascending; empty for none."""
        return [p for p, f in zip(self.candidates, self.found[row], strict=True) if f]

    def season(self, row: int = 0) -> int:
        """The season to forecast with: the longest period found (it holds the shorter
        ones as harmonics when they divide it), 0 for no season."""
        found = self.periods(row)
        return found[-1] if found else 0

    @property
    def seasons(self) -> np.ndarray:
        """``season(row)`` for every row, as an (N,) int array."""
        lookup = np.array([0, *self.candidates], dtype=np.int64)
        rank = (self.found * np.arange(1, len(self.candidates) + 1)).max(axis=1, initial=0)
        return lookup[rank]


def acf(y: np.ndarray, lags: Sequence[int] | np.ndarray) -> np.ndarray:
    """Sample autocorrelation (N, len(lags)): sum of lagged products of the demeaned
    series over the total sum of squares, i.e. statsmodels' default (``adjusted=False``).
    A constant series has autocorrelation 0 (nothing repeats that is not trivially so)."""
    a = as_batch(y)
    d = a - a.mean(axis=1, keepdims=True)
    denom = np.einsum("nt,nt->n", d, d)
    t = a.shape[1]
    out = np.zeros((a.shape[0], len(lags)))
    for i, lag in enumerate(lags):
        if not 0 <= lag < t:
            raise ForecastError(f"lag {lag} is outside 0..{t - 1} for a history of {t} steps")
        out[:, i] = np.einsum("nt,nt->n", d[:, : t - lag], d[:, lag:])
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(denom[:, None] > 0, out / denom[:, None], 0.0)


def detect_period(
    y: np.ndarray,
    *,
    step_seconds: float,
    candidates: Sequence[float] = (DAY, WEEK),
    peak_ratio: float = PEAK_RATIO,
    acf_bound: float | None = None,
    max_harmonics: int = MAX_HARMONICS,
) -> PeriodResult:
    """Which of the candidate periods (seconds) each series shows; see the module doc.

    ``acf_bound`` defaults to two white-noise standard errors at each candidate's lag
    (see ``_acf_bound``). Candidates shorter than two steps, or longer
    than half the history, are reported as untestable and not found.
    """
    a = as_batch(y)
    require_length(a, 4, "period detection")
    if not step_seconds > 0:
        raise ForecastError(f"step_seconds must be positive, got {step_seconds!r}")
    if max_harmonics < 1 or not peak_ratio > 0:
        raise ForecastError("max_harmonics must be >= 1 and peak_ratio positive")
    n_rows, t = a.shape
    steps = sorted({round(c / step_seconds) for c in candidates})
    steps = [p for p in steps if p >= 2]
    testable = tuple(t >= 2 * p for p in steps)
    bounds = tuple(
        (_acf_bound((t // p) * p, p) if acf_bound is None else float(acf_bound)) if ok else 0.0
        for p, ok in zip(steps, testable, strict=True)
    )
    acfs = np.zeros((n_rows, len(steps)))
    peaks = np.zeros((n_rows, len(steps)))
    found = np.zeros((n_rows, len(steps)), dtype=bool)
    for i, p in enumerate(steps):
        if not testable[i]:
            continue
        n = (t // p) * p
        resid = _detrend_cycles(a[:, t - n :], p)
        bias = np.zeros(n_rows)
        for j in range(i):
            q = steps[j]
            if p % q == 0 and found[:, j].any():
                resid = np.where(found[:, j, None], resid - _profile(resid, q), resid)
                # Subtracting a phase mean over c = n/q cycles leaves white noise with
                # correlation -1/(c - 1) between equal phases (exact for iid noise).
                shift = (n - p) / n / (n // q - 1)
                bias = np.where(found[:, j], np.maximum(bias, shift), bias)
        acfs[:, i] = acf(resid, [p])[:, 0] + bias
        peaks[:, i] = _peak_ratio(resid, p, steps, max_harmonics)
        found[:, i] = (acfs[:, i] > bounds[i]) & (peaks[:, i] >= peak_ratio)
    return PeriodResult(tuple(steps), testable, acfs, bounds, peaks, found)


def _acf_bound(n: int, lag: int) -> float:
    """Two standard errors of a white-noise sample ACF at ``lag`` from ``n`` samples.

    Var r_k ≈ (n - k) / (n (n + 2)) is the finite-sample form behind the Ljung–Box
    statistic (Ljung & Box 1978, from memory); for k << n it is Bartlett's 1/n, and at
    the weekly lag of a two-week history it is half that, so the bound is tighter.
    """
    return 2.0 * float(np.sqrt((n - lag) / (n * (n + 2.0))))


def _detrend_cycles(x: np.ndarray, p: int) -> np.ndarray:
    """Remove the least-squares line through the means of whole cycles of p.

    A line fitted to the raw samples would absorb part of any pattern that is not
    symmetric within the window (a weekend near the end tilts it) and, subtracted,
    spread that into every FFT bin; the mean of a whole cycle contains none of the
    pattern, so a line through cycle means leaves periodic components untouched.
    """
    n_rows, n = x.shape
    c = n // p
    means = x.reshape(n_rows, c, p).mean(axis=2)
    centre = np.arange(c) - (c - 1) / 2.0
    slope = (means @ centre) / (centre @ centre) / p
    tc = np.arange(n) - (n - 1) / 2.0
    return x - means.mean(axis=1, keepdims=True) - slope[:, None] * tc[None, :]


def _profile(a: np.ndarray, q: int) -> np.ndarray:
    """Each series' mean value at every phase of period q, laid out along time."""
    n_rows, t = a.shape
    full = (t // q) * q
    sums = a[:, :full].reshape(n_rows, t // q, q).sum(axis=1)
    counts = np.full(q, t // q, dtype=np.float64)
    rest = t - full
    sums[:, :rest] += a[:, full:]
    counts[:rest] += 1
    means = sums / counts
    return means[:, np.arange(t) % q]


def _peak_ratio(a: np.ndarray, p: int, steps: Sequence[int], max_harmonics: int) -> np.ndarray:
    """Strongest harmonic of p over its non-harmonic neighbours' mean power, per row."""
    n = a.shape[1]  # a whole number of periods p (the caller's window)
    fund = n // p
    top = (n - 1) // 2  # last bin below Nyquist
    used = min(top, max_harmonics * fund + BACKGROUND_HALF_WIDTH) + 1
    spec = np.fft.rfft(a, axis=1)[:, :used]
    # AR(1) prewhitening: a red (trending, random-walk-like) spectrum is steep at low
    # bins, so neighbours would misjudge a low bin's background. Filtering circularly
    # with 1 - phi·B multiplies the periodogram by |1 - phi·exp(-iω)|², exactly.
    phi = np.clip(acf(a, [1])[:, 0], 0.0, 1.0)[:, None]
    cos_w = np.cos(2 * np.pi * np.arange(used) / n)[None, :]
    power = (spec.real**2 + spec.imag**2) * (1.0 - 2.0 * phi * cos_w + phi**2)
    bins = np.arange(used)
    structured = np.zeros(used, dtype=bool)  # harmonics of any candidate that fits
    for q in steps:
        if n % q == 0:
            structured |= bins % (n // q) == 0
    structured[0] = True
    own = np.array([m * fund for m in range(1, max_harmonics + 1) if m * fund <= top])
    own = np.array([k for k in own if all(n % q or k % (n // q) for q in steps if q < p)], int)
    if own.size == 0:
        return np.zeros(a.shape[0])
    weights = np.zeros((own.size, used))
    for r, k in enumerate(own):
        near = (np.abs(bins - k) <= BACKGROUND_HALF_WIDTH) & ~structured
        if near.any():
            weights[r, near] = 1.0 / near.sum()
    background = power @ weights.T
    peak = power[:, own]
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(background > 0, peak / background, np.where(peak > 0, np.inf, 0.0))
    return ratio.max(axis=1)
