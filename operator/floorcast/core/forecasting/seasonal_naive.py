"""Seasonal naive: tomorrow looks like today (or like the last few days, robustly).

The plain method (``seasons=1``) repeats the last season. It is the benchmark every
other method must beat (MASE is scaled by it) and the fallback when nothing else is
trustworthy, so it has to work on the shortest usable history.

The robust variant (``seasons=k > 1``) takes, for every phase of the season, the
**median** over the last ``k`` seasons. A median rather than a mean because the thing
to survive is one bad season — an incident, a holiday, a load test — and with the
engine's ``k = 3`` the median simply ignores the odd one out, where a mean would copy a
third of it into every future season. (A trimmed mean that drops one value at each end
is the same thing as the median for k = 3, and needs k >= 5 to differ.)

A median over past seasons sits at the level of the *middle* season, so on a trending
series it lags by (k + 1) / 2 seasons instead of the plain method's one. The level
correction adds ``mean(last season) - mean(profile)``: the profile supplies the shape,
the last season the level, and the lag is back to that of plain seasonal naive. For a
purely linear trend the corrected forecast equals the plain one exactly.
"""

from __future__ import annotations

import numpy as np

from floorcast.core.forecasting.base import ForecastError, as_batch, require_length

#: How many seasons the engine's robust variant looks back over.
ROBUST_SEASONS = 3


def forecast(
    y: np.ndarray,
    *,
    season: int,
    horizon: int,
    seasons: int = 1,
    level: bool = True,
) -> np.ndarray:
    """Point forecasts (N, horizon) from the last ``seasons`` seasons of each series.

    ``season=0`` means no season: the last value is repeated (naive forecast).
    ``level=False`` switches the robust variant's level correction off; it exists so
    the correction's benefit can be measured, not as a recommended setting.
    """
    a = as_batch(y)
    _check(season=season, horizon=horizon, seasons=seasons)
    n, t = a.shape
    if season == 0:
        require_length(a, 1, "the naive forecast")
        return np.repeat(a[:, -1:], horizon, axis=1)

    require_length(
        a,
        seasons * season,
        f"seasonal naive over {seasons} season(s) of {season} steps",
    )
    phase = np.arange(horizon) % season
    if seasons == 1:
        return a[:, t - season + phase]

    past = a[:, t - seasons * season :].reshape(n, seasons, season)
    profile = np.median(past, axis=1)
    if level:
        profile = profile + (past[:, -1, :].mean(axis=1) - profile.mean(axis=1))[:, None]
    return profile[:, phase]


def _check(*, season: int, horizon: int, seasons: int) -> None:
    """Reject arguments that would silently index the wrong history."""
    for name, value, low in (
        ("season", season, 0),
        ("horizon", horizon, 0),
        ("seasons", seasons, 1),
    ):
        if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < low:
            raise ForecastError(f"{name} must be an integer >= {low}, got {value!r}")
