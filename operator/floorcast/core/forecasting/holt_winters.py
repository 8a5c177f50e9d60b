"""Holt-Winters exponential smoothing: level, (damped) trend, one or two seasons.

The model is the one statsmodels' ``ExponentialSmoothing`` implements (Hyndman &
Athanasopoulos, *Forecasting: Principles and Practice*, 2nd ed., §7.2–7.4): additive
or multiplicative seasonality, an additive trend that may be damped (Gardner &
McKenzie, "Forecasting trends in time series", Management Science 31, 1985), and the
same parameter names and constraints. Our fitted values equal statsmodels' for the
same parameters and initial states (~1e-15 relative). The recursions run in
``holt_winters_filter``, the parameter search in ``holt_winters_fit``, the initial
states in ``holt_winters_init``; this module is the public face.

Two seasons (daily inside weekly): ``season2`` adds a second seasonal component, as
in J. W. Taylor, "Short-term electricity demand forecasting using double seasonal
exponential smoothing", Journal of the Operational Research Society 54, 799–805
(2003). In the additive case it is Taylor's model exactly, written in
error-correction form: his daily/weekly smoothing parameters (d, w) are ours as
``gamma = d (1 - alpha)``, ``gamma2 = w (1 - alpha)``, and the constraint
d, w <= 1 becomes gamma, gamma2 <= 1 - alpha, statsmodels' own seasonal constraint.
The multiplicative case updates the seasonals against the one-step level
(l + phi b) rather than Taylor's new level, as statsmodels does with one season.
Taylor's optional AR(1) adjustment of the residuals is not implemented. ``season2``
must be a multiple of ``season`` (7 days of ``season`` steps, typically).

Choices, and why:
* Defaults ``trend="add", damped=True, seasonal="add", init="estimated"``. Damping
  keeps a trend fitted on two weeks from running away over a day's horizon;
  additive seasonality works with zero load (idle nights); estimated initial states
  are statsmodels' default and give the lowest in-sample error.
* ``init="estimated"`` means initial states that minimise the SSE jointly with the
  parameters: exactly (linear least squares) with additive seasonality or none; with
  multiplicative seasonality by least squares with the level path frozen, then one
  Gauss-Newton step, each kept only where it lowers the SSE. With two seasons the
  initial states are the heuristic ones (``holt_winters_init.double``), not refined:
  m + m2 of them would make the least-squares solve the slowest part of the fit.
* The SSE minimised is statsmodels', under its constraints. On 14-day 5-minute
  histories the fit ends within 0.4 % of statsmodels' SSE, often below; on short
  ones (2-4 seasons, estimated states) the search can stop a few % above it, up to
  ~20 % in synthetic multiplicative cases (the trend/damping/states coupling).
* Multiplicative seasonality needs strictly positive history: such rows raise
  ``ForecastError`` naming them, rather than silently switching model (a caller that
  wants a fallback can retry those rows additively).
* Histories shorter than two seasons (``season2`` seasons when given) raise
  ``ForecastError``; so does a non-seasonal history under ten steps.
* Forecasts are not clipped at zero here: the engine clips (a negative forecast is a
  modelling signal worth seeing in tests). They are never NaN or infinite: a row whose
  forecast would be raises ``ForecastError``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from floorcast.core.forecasting import holt_winters_filter as hwf
from floorcast.core.forecasting import holt_winters_init as hwi
from floorcast.core.forecasting.base import ForecastError, as_batch, require_length
from floorcast.core.forecasting.holt_winters_filter import Spec, States
from floorcast.core.forecasting.holt_winters_fit import improve_states, params, search

INITS = ("estimated", "heuristic", "known")
_MIN_NONSEASONAL = 10


@dataclass
class HoltWintersFit:
    """Per-series parameters, states and in-sample fit (all arrays lead with N).

    ``phi`` is the damping factor as used (1 for an undamped trend, 0 with no trend);
    ``beta`` the Holt-form trend gain (statsmodels' ``smoothing_trend``).
    ``initial_seasonal[:, j]`` is the state used for ``y[:, j]`` (statsmodels' order);
    ``final_seasonal[:, t % season]`` the latest state for time t, so step h of the
    forecast uses index ``(T + h - 1) % season``.
    """

    season: int
    season2: int
    trend: str | None
    damped: bool
    seasonal: str
    alpha: np.ndarray
    beta: np.ndarray
    gamma: np.ndarray
    gamma2: np.ndarray
    phi: np.ndarray
    initial_level: np.ndarray
    initial_trend: np.ndarray
    initial_seasonal: np.ndarray | None
    initial_seasonal2: np.ndarray | None
    final_level: np.ndarray
    final_trend: np.ndarray
    final_seasonal: np.ndarray | None
    final_seasonal2: np.ndarray | None
    fitted: np.ndarray
    sse: np.ndarray
    n_obs: int

    def forecast(self, horizon: int) -> np.ndarray:
        """Point forecasts (N, horizon) after the last observation."""
        _check_horizon(horizon)
        h = np.arange(1, horizon + 1)
        if self.trend is None:
            damp = np.zeros(horizon)
        elif self.damped:
            damp = np.cumsum(self.phi[:, None] ** h[None, :], axis=1)  # sum_{k<=h} phi^k
        else:
            damp = h.astype(float)
        base = self.final_level[:, None] + damp * self.final_trend[:, None]
        t = self.n_obs + h - 1
        seas = [s for s in (self.final_seasonal, self.final_seasonal2) if s is not None]
        parts = [s[:, t % s.shape[1]] for s in seas]
        with np.errstate(all="ignore"):
            for p in parts:
                base = base * p if self.seasonal == "mul" else base + p
        bad = ~np.all(np.isfinite(base), axis=1)
        if bad.any():
            raise ForecastError(
                f"Holt-Winters forecast for series {np.flatnonzero(bad)[:5].tolist()} "
                "is not finite (the fitted level or seasonals broke down)"
            )
        return base


def _check_horizon(horizon: int) -> None:
    if int(horizon) != horizon or horizon < 1:
        raise ForecastError(f"horizon must be a positive number of steps, got {horizon}")


def _spec(
    y: np.ndarray, season: int, season2: int, trend: str | None, damped: bool, seasonal: str
) -> Spec:
    """Validate the model options against the history; ForecastError if unusable."""
    for name, v in (("season", season), ("season2", season2)):
        if int(v) != v or v < 0:
            raise ForecastError(f"{name} must be a whole number of steps >= 0, got {v}")
    season, season2 = int(season), int(season2)
    if trend not in (None, "add"):
        raise ForecastError(f"trend must be 'add' or None, got {trend!r}")
    if seasonal not in ("add", "mul"):
        raise ForecastError(f"seasonal must be 'add' or 'mul', got {seasonal!r}")
    if season2 and (season < 2 or season2 % season or season2 <= season):
        raise ForecastError(
            f"season2 ({season2}) must be a multiple of season ({season}) and longer"
        )
    if season == 1:
        season = 0  # a one-step season is just the level
    if season:
        longest = season2 or season
        require_length(y, 2 * longest, f"Holt-Winters (two seasons of {longest} steps)")
    else:
        require_length(y, _MIN_NONSEASONAL, "Holt-Winters without a season (ten steps)")
    mult = seasonal == "mul" and season > 0
    if mult:
        bad = np.flatnonzero(np.any(y <= 0, axis=1))
        if bad.size:
            raise ForecastError(
                f"multiplicative seasonality needs positive values; series "
                f"{bad[:5].tolist()} contain zeros or negatives (use seasonal='add')"
            )
    return Spec(season, season2, mult, trend == "add", bool(damped) and trend == "add")


def _rows(v: object, n: int, width: int | None = None) -> np.ndarray:
    """A caller's value per series (or one shared value) as an (n,) / (n, width) array."""
    a = np.asarray(v, dtype=np.float64)
    shape = (n,) if width is None else (n, width)
    try:
        return np.array(np.broadcast_to(a, shape))
    except ValueError:
        raise ForecastError(
            f"expected a value per series of shape {shape}, got {a.shape}"
        ) from None


def _initial(y: np.ndarray, spec: Spec) -> States:
    if spec.m2:
        return hwi.double(y, spec)
    if y.shape[1] >= hwi.heuristic_min_length(spec.m):
        return hwi.heuristic(y, spec)
    return hwi.simple(y, spec)


def _run(
    y: np.ndarray, spec: Spec, prm: tuple[np.ndarray, ...], st: States, *, fitted: bool = False
) -> hwf.FilterOut:
    """One recursion run per series with its own parameters (groups = series)."""
    a, b, p, g, g2 = prm
    states = (st.level, st.trend, st.season, st.season2)
    ser = np.arange(len(y))[:, None]
    return hwf.run(y, ser, a, b, p, g[:, None], g2[:, None], *states, mult=spec.mult, fitted=fitted)


def _known_states(spec: Spec, n: int, given: dict[str, np.ndarray | float | None]) -> States:
    """The caller's initial states (per series, or one value shared by all)."""
    need = ["initial_level"] + ["initial_trend"] * spec.trend
    need += ["initial_seasonal"] * bool(spec.m) + ["initial_seasonal2"] * bool(spec.m2)
    missing = [k for k in need if given[k] is None]
    if missing:
        raise ForecastError(f"init='known' needs {', '.join(missing)}")
    return States(
        _rows(given["initial_level"], n),
        _rows(given["initial_trend"], n) if spec.trend else np.zeros(n),
        _rows(given["initial_seasonal"], n, spec.m) if spec.m else None,
        _rows(given["initial_seasonal2"], n, spec.m2) if spec.m2 else None,
    )


def _fixed_params(
    spec: Spec, n: int, given: dict[str, float | np.ndarray | None]
) -> tuple[np.ndarray, ...] | None:
    """(alpha, beta, phi, gamma, gamma2) per series if the caller fixed them all."""
    used = ["smoothing_level"] + ["smoothing_trend"] * spec.trend
    used += ["damping_trend"] * spec.damped + ["smoothing_seasonal"] * bool(spec.m)
    used += ["smoothing_seasonal2"] * bool(spec.m2)
    have = [k for k in used if given[k] is not None]
    if not have:
        return None
    if len(have) < len(used):
        missing = ", ".join(k for k in used if given[k] is None)
        raise ForecastError(f"fix all smoothing parameters or none; missing {missing}")
    zero = np.zeros(n)
    return (
        _rows(given["smoothing_level"], n),
        _rows(given["smoothing_trend"], n) if spec.trend else zero,
        _rows(given["damping_trend"], n) if spec.damped else np.full(n, float(spec.trend)),
        _rows(given["smoothing_seasonal"], n) if spec.m else zero,
        _rows(given["smoothing_seasonal2"], n) if spec.m2 else zero,
    )


def fit(
    y: np.ndarray,
    *,
    season: int,
    season2: int = 0,
    trend: str | None = "add",
    damped: bool = True,
    seasonal: str = "add",
    init: str = "estimated",
    smoothing_level: float | np.ndarray | None = None,
    smoothing_trend: float | np.ndarray | None = None,
    smoothing_seasonal: float | np.ndarray | None = None,
    smoothing_seasonal2: float | np.ndarray | None = None,
    damping_trend: float | np.ndarray | None = None,
    initial_level: float | np.ndarray | None = None,
    initial_trend: float | np.ndarray | None = None,
    initial_seasonal: np.ndarray | None = None,
    initial_seasonal2: np.ndarray | None = None,
) -> HoltWintersFit:
    """Fit every series of ``y`` (N, T) or (T,) by least one-step-ahead SSE.

    Smoothing parameters use statsmodels' names and meaning (``smoothing_trend`` is
    the Holt-form beta, bounded by alpha). Give all that the model has, or none (then
    they are searched); partial fixing is not supported. ``init="known"`` takes the
    ``initial_*`` states (per series, or one shared value); ``"heuristic"`` is
    Hyndman et al. (2008) §2.6.1 as statsmodels computes it (statsmodels' "simple"
    states for seasons under ten steps with too little history for it; the
    ``double`` heuristic with two seasons).
    """
    a = as_batch(y)
    spec = _spec(a, season, season2, trend, damped, seasonal)
    if init not in INITS:
        raise ForecastError(f"init must be one of {', '.join(INITS)}, got {init!r}")
    given = {
        "initial_level": initial_level,
        "initial_trend": initial_trend,
        "initial_seasonal": initial_seasonal,
        "initial_seasonal2": initial_seasonal2,
    }
    st = _known_states(spec, len(a), given) if init == "known" else None
    if st is None:
        if any(v is not None for v in given.values()):
            raise ForecastError("initial_* states are only used with init='known'")
        st = _initial(a, spec)
    prm = _fixed_params(
        spec,
        len(a),
        {
            "smoothing_level": smoothing_level,
            "smoothing_trend": smoothing_trend,
            "damping_trend": damping_trend,
            "smoothing_seasonal": smoothing_seasonal,
            "smoothing_seasonal2": smoothing_seasonal2,
        },
    )
    if prm is None:
        u, st = search(a, spec, st, init)
        prm = params(u, spec)
    elif init == "estimated":
        st = improve_states(a, spec, prm, st)
    out = _run(a, spec, prm, st, fitted=True)

    def rows(s: np.ndarray | None) -> np.ndarray | None:
        return None if s is None else s[:, :, 0].T.copy()

    return HoltWintersFit(
        season=spec.m,
        season2=spec.m2,
        trend=trend if spec.trend else None,
        damped=spec.damped,
        seasonal=seasonal if spec.m else "add",
        alpha=prm[0],
        beta=prm[1],
        phi=prm[2],
        gamma=prm[3],
        gamma2=prm[4],
        initial_level=st.level,
        initial_trend=st.trend,
        initial_seasonal=st.season,
        initial_seasonal2=st.season2,
        final_level=out.level[:, 0],
        final_trend=out.trend[:, 0],
        final_seasonal=rows(out.season),
        final_seasonal2=rows(out.season2),
        fitted=out.fitted[:, :, 0].T.copy(),
        sse=out.sse[:, 0],
        n_obs=a.shape[1],
    )


def forecast(
    y: np.ndarray,
    *,
    season: int,
    horizon: int,
    trend: str | None = "add",
    damped: bool = True,
    seasonal: str = "add",
    season2: int = 0,
    init: str = "estimated",
) -> np.ndarray:
    """Point forecasts (N, horizon): the registry's ``holt-winters`` method."""
    _check_horizon(horizon)
    model = fit(
        y, season=season, season2=season2, trend=trend, damped=damped, seasonal=seasonal, init=init
    )
    return model.forecast(int(horizon))


def double_seasonal_forecast(
    y: np.ndarray,
    *,
    season: int,
    horizon: int,
    days: int = 7,
    trend: str | None = "add",
    damped: bool = True,
    seasonal: str = "add",
    init: str = "estimated",
) -> np.ndarray:
    """Taylor (2003) double-seasonal forecasts with ``season2 = days * season``, in
    the registry's signature, so it can be registered as a method of its own."""
    if not season:
        raise ForecastError("double-seasonal Holt-Winters needs a season (the day)")
    return forecast(
        y,
        season=season,
        horizon=horizon,
        season2=days * season,
        trend=trend,
        damped=damped,
        seasonal=seasonal,
        init=init,
    )


def day_and_week(season: int) -> tuple[int, int]:
    """(day, week) in steps from the engine's season, which is the week when the
    history showed a weekly rhythm and the day otherwise. A day is a whole number of
    steps for every step that divides 24 h, and such a count is never a multiple of 7
    (86 400 s = 2⁷·3³·5² s), so a season divisible by 7 is a week."""
    if season >= 14 and season % 7 == 0:
        return season // 7, season
    return season, 7 * season


def double_forecast(y: np.ndarray, *, season: int, horizon: int) -> np.ndarray:
    """Registry ``holt-winters-double``: Taylor's (2003) day-inside-week model, additive,
    damped trend; it needs two weeks of history."""
    if not season:
        raise ForecastError("double-seasonal Holt-Winters needs a season (the day or the week)")
    day, week = day_and_week(int(season))
    return forecast(y, season=day, horizon=horizon, season2=week)
