"""Several past seasons averaged per phase: the robust day-ahead benchmark for human load.

On real human-rhythm traces a plain average of the last four weeks at the same
half-hour beat every model the engine had (issue 13: 7.3 % against 10.8 % WAPE on one
trace): one week repeats that week's accidents, and fitted models chase them. So the
engine offers the average itself, and two robust versions of it, as methods:

* ``mean``: the mean over the last ``k`` seasons, per phase.
* ``median``: the per-phase median; one odd week (an incident, a holiday) is ignored
  outright instead of a 1/k share of it being copied forward.
* ``trimmed``: the mean after dropping the lowest and the highest value per phase
  (``scipy.stats.trim_mean`` with one value cut at each end); between the two.

Level adjustment: an average of ``k`` weeks sits at the level of the middle week, so on
a growing service it lags. The profile is rescaled so that its mean over the last
season equals that season's mean (a ratio, not a shift: load that grows grows at the
peak, and an idle night should stay idle). The ratio is bounded to [1/2, 2] — beyond
that the last season is an anomaly, not a level (common practice, no source).

The "season" is the engine's season: the week when the history shows a weekly rhythm,
else the day. A history holding fewer than ``k`` seasons uses all it has (at least
two), so the methods still work on the two weeks a new service has.
"""

from __future__ import annotations

import numpy as np

from floorcast.core.forecasting.base import ForecastError, as_batch, require_length

#: Seasons each variant averages when the history has them.
WEEKS = {"mean": 4, "median": 5, "trimmed": 6}
LEVEL_BOUNDS = (0.5, 2.0)
HOWS = ("mean", "median", "trimmed")


def profile(past: np.ndarray, how: str) -> np.ndarray:
    """(N, k, m) past seasons -> (N, m) per-phase location."""
    if how == "mean":
        return past.mean(axis=1)
    if how == "median":
        return np.median(past, axis=1)
    if how == "trimmed":
        k = past.shape[1]
        if k < 3:
            return past.mean(axis=1)
        s = np.sort(past, axis=1)
        return s[:, 1:-1].mean(axis=1)
    raise ForecastError(f"profile must be one of {', '.join(HOWS)}, got {how!r}")


def level_ratio(last: np.ndarray, prof: np.ndarray) -> np.ndarray:
    """(N,) factor taking the profile to the last season's level, bounded.

    With a weekly season the ratio is the median of the seven daily ratios (days the
    profile has no load on are left out), so one odd day in the last week — a holiday,
    an outage — does not rescale the whole forecast; with a daily season it is the
    ratio of the two means."""
    n, m = last.shape
    parts = 7 if m >= 14 and m % 7 == 0 else 1
    num = last.reshape(n, parts, -1).mean(axis=2)
    den = prof.reshape(n, parts, -1).mean(axis=2)
    use = (den > 0) & (num >= 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where(use, num / np.where(den > 0, den, 1.0), np.nan)
    r = np.where(
        use.any(axis=1), np.nanmedian(np.where(use.any(axis=1, keepdims=True), r, 1.0), axis=1), 1.0
    )
    return np.clip(r, *LEVEL_BOUNDS)


def forecast(
    y: np.ndarray,
    *,
    season: int,
    horizon: int,
    how: str = "mean",
    weeks: int | None = None,
    level: bool = True,
) -> np.ndarray:
    """Point forecasts (N, horizon) from the per-phase ``how`` of the last ``weeks``
    seasons (default ``WEEKS[how]``), rescaled to the last season's level."""
    a = as_batch(y)
    if how not in HOWS:
        raise ForecastError(f"profile must be one of {', '.join(HOWS)}, got {how!r}")
    if isinstance(season, bool) or not isinstance(season, int | np.integer) or season < 1:
        raise ForecastError(f"the multi-season average needs a season ≥ 1 step, got {season!r}")
    if isinstance(horizon, bool) or not isinstance(horizon, int | np.integer) or horizon < 1:
        raise ForecastError(f"horizon must be an integer ≥ 1, got {horizon!r}")
    k_max = WEEKS[how] if weeks is None else int(weeks)
    if k_max < 1:
        raise ForecastError(f"weeks must be ≥ 1, got {weeks!r}")
    require_length(a, min(2, k_max) * season, f"the {how} of past seasons of {season} steps")
    n, t = a.shape
    k = min(k_max, t // season)
    past = a[:, t - k * season :].reshape(n, k, season)
    prof = profile(past, how)
    if level:
        prof = prof * level_ratio(past[:, -1], prof)[:, None]
    return prof[:, np.arange(horizon) % season]


def mean_forecast(y: np.ndarray, *, season: int, horizon: int) -> np.ndarray:
    """Registry ``seasonal-mean``: level-adjusted mean of the last four seasons."""
    return forecast(y, season=season, horizon=horizon, how="mean")


def average_forecast(y: np.ndarray, *, season: int, horizon: int) -> np.ndarray:
    """Registry ``seasonal-average``: the plain four-season average, no level
    adjustment (the benchmark that beat ``auto`` in issue 13)."""
    return forecast(y, season=season, horizon=horizon, how="mean", level=False)


def median_forecast(y: np.ndarray, *, season: int, horizon: int) -> np.ndarray:
    """Registry ``seasonal-median``: level-adjusted median of the last five seasons."""
    return forecast(y, season=season, horizon=horizon, how="median")


def trimmed_forecast(y: np.ndarray, *, season: int, horizon: int) -> np.ndarray:
    """Registry ``seasonal-trimmed``: level-adjusted trimmed mean of the last six."""
    return forecast(y, season=season, horizon=horizon, how="trimmed")
