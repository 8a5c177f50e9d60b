"""The forecasting engine: history in, point forecast with bands and provenance out.

One pass over a whole fleet: clean the history (``preprocess``), evaluate the
candidate methods by rolling origin (``select``), forecast with each series' best
method once per group of series that share it, size bands from the chosen method's
rolling-origin errors (``bands``) and record why, for the forecast JSON's metadata.
Methods are reached only through the registry (``floorcast.core.forecasting.method``)
so new ones need no change here. Load is never negative, so forecasts and bands are
clipped at 0 here. There is no clock: ``generated`` is a parameter.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from floorcast.core import forecasting
from floorcast.core.forecasting import band_levels, bands, combine, evaluation, finalize, preprocess
from floorcast.core.forecasting.base import ForecastError
from floorcast.core.forecasting.select import select, unevaluated
from floorcast.core.series import Series
from floorcast.durations import format_duration, parse_duration
from floorcast.errors import InputError

#: Preferred when nothing could be evaluated: it needs one season and cannot drift.
FALLBACK_METHOD = "seasonal-naive"
_DAY = pd.Timedelta(days=1)


@dataclass(frozen=True)
class Options:
    """Tuning knobs with defaults that suit 5-minute load over two weeks."""

    #: Rolling origins: the newest leaves one evaluation horizon to score, the others
    #: step back a day each, as many as the history allows up to two weeks of days
    #: (each weekday at least once with a week's training before it). With three, a
    #: method that got the last three weekdays right won even where it failed every
    #: weekend, and bands rested on three days; on bench_accuracy.py's Taylor data
    #: seven origins left auto 8 % behind statsmodels' Holt-Winters, fourteen tied.
    origins: int = 14
    origin_spacing: pd.Timedelta = _DAY
    #: Score at most a day ahead: longer horizons would leave too little training data
    #: before the origins; bands beyond it keep the last evaluated width.
    max_eval_horizon: pd.Timedelta = _DAY
    clip: bool = True
    clip_k: float = preprocess.DEFAULT_CLIP_K
    clip_window: int = preprocess.DEFAULT_CLIP_WINDOW
    # "auto": the same phase of the season when there is one, else a rolling median.
    # A fixed rolling window is a different span of time at every step size: at 30-min
    # steps 7 points are 3.5 h, across which a real morning ramp looks like an outlier
    # (on the Taylor benchmark it clipped true peaks by up to 7 % and tripled MASE).
    clip_how: str = "auto"
    pool: int | None = None  # horizon steps pooled per band block (None: bands.default_pool)


@dataclass(frozen=True, eq=False)
class BatchForecast:
    """Forecasts for N series over H steps, with the provenance of each."""

    point: np.ndarray  # (N, H), ≥ 0
    lower: np.ndarray  # (N, H), 0 ≤ lower ≤ point
    upper: np.ndarray  # (N, H), ≥ point
    method: tuple[str, ...]
    season: np.ndarray  # (N,) steps, 0 = none
    scores: tuple[dict[str, dict[str, float | None]], ...]  # method -> metric -> value
    meta: tuple[dict[str, Any], ...]
    quantiles: tuple[float, float]
    step: pd.Timedelta
    start: tuple[pd.Timestamp | None, ...] = ()  # first forecast instant, if known
    units: tuple[str | None, ...] = ()
    generated: pd.Timestamp | None = None
    sources: tuple[str, ...] = field(default=())
    #: Forecast quantiles (docs/formats.md, "Quantiles"): ``levels`` and the load at
    #: each, (N, L, H), from the band's residuals (``band_levels``); none when L = 0.
    levels: tuple[float, ...] = ()
    qvalues: np.ndarray | None = None

    def series(self, i: int) -> Series:
        """Row ``i`` as a forecast ``Series`` (needs a known start)."""
        if not self.start or self.start[i] is None:
            raise InputError("the history's start time is unknown; pass start= to forecast_batch")
        return Series(
            start=self.start[i],
            step=self.step,
            values=self.point[i],
            lower=self.lower[i],
            upper=self.upper[i],
            unit=self.units[i] if self.units else None,
            generated=self.generated,
            source=self.sources[i] if self.sources else "<forecast>",
            meta=self.meta[i],
            levels=self.levels if self.qvalues is not None else (),
            quantiles=None if self.qvalues is None else self.qvalues[i],
        )


def steps(value: Any, step: pd.Timedelta | None, what: str) -> int:
    """A count of steps from an int or a duration that is a whole number of steps."""
    if isinstance(value, int | np.integer) and not isinstance(value, bool):
        return int(value)
    if isinstance(value, str):
        value = parse_duration(value, field=what)
    if step is None:
        raise InputError(f"{what} given as a duration needs the series step")
    ratio = pd.Timedelta(value) / step
    if not math.isclose(ratio, round(ratio), rel_tol=0, abs_tol=1e-6):
        raise InputError(f"{what} {pd.Timedelta(value)} is not a whole number of {step} steps")
    return round(ratio)


def detect_season(y: np.ndarray, step: pd.Timedelta) -> np.ndarray:
    """HOOK for ``season="auto"``: ``core/forecasting/periods.py`` ``detect_period``,
    written separately. Until that module exists, "auto" is a clear error."""
    try:
        from floorcast.core.forecasting import periods
    except ModuleNotFoundError as e:
        if e.name != f"{__package__}.periods":
            raise
        raise ForecastError(
            "season 'auto' needs period detection, which is not available "
            "yet; give the season explicitly (e.g. 1d)"
        ) from None
    found = periods.detect_period(y, step_seconds=step.total_seconds()).seasons
    return np.broadcast_to(np.asarray(found, dtype=np.int64), (y.shape[0],)).copy()


def _rows(y: Any, step: Any, filled: Any, start: Any) -> tuple[list, pd.Timedelta, dict]:
    """Split the input into per-series value arrays and what is known about each."""
    if isinstance(y, Sequence) and y and all(isinstance(s, Series) for s in y):
        steps_ = {s.step for s in y}
        if len(steps_) > 1:
            raise InputError(f"all series must share one step, got {sorted(map(str, steps_))}")
        own = next(iter(steps_))
        if step is not None and pd.Timedelta(step) != own:
            raise InputError(f"step {pd.Timedelta(step)} disagrees with the series' step {own}")
        if any(len(s) == 0 for s in y):
            raise ForecastError("an empty series cannot be forecast")
        info = {
            "filled": [s.filled_mask() for s in y],
            "start": [s.start for s in y],
            "units": tuple(s.unit for s in y),
            "sources": tuple(s.source for s in y),
        }
        return [np.asarray(s.values, dtype=np.float64) for s in y], own, info
    a = np.asarray(y, dtype=np.float64)
    a = a[None, :] if a.ndim == 1 else a
    if a.ndim != 2 or a.shape[1] == 0:
        raise ForecastError(f"expected a non-empty (N, T) batch of series, got shape {a.shape}")
    if step is None:
        raise InputError("forecast_batch needs step= for an array of series")
    f = None if filled is None else np.broadcast_to(np.asarray(filled, dtype=bool), a.shape)
    t0 = None if start is None else pd.Timestamp(start)
    info = {
        "filled": [None if f is None else f[i] for i in range(len(a))],
        "start": [t0] * len(a),
        "units": (),
        "sources": (),
    }
    return list(a), pd.Timedelta(step), info


def _season(season: Any, rows: list[np.ndarray], dt: pd.Timedelta) -> np.ndarray:
    n = len(rows)
    if season != "auto":
        s = 0 if season is None else steps(season, dt, "season")
        if s < 0:
            raise InputError(f"season must be ≥ 0 steps, got {s}")
        return np.full(n, s, dtype=np.int64)
    out = np.zeros(n, dtype=np.int64)
    lengths = np.array([len(r) for r in rows])
    for t in np.unique(lengths):
        idx = np.flatnonzero(lengths == t)
        out[idx] = detect_season(np.stack([rows[i] for i in idx]), dt)
    return out


def forecast_batch(
    y: np.ndarray | Sequence[Series],
    *,
    horizon: int | pd.Timedelta | str,
    step: pd.Timedelta | str | None = None,
    method: str = "auto",
    season: str | int | pd.Timedelta | None = "auto",
    quantiles: tuple[float, float] = bands.DEFAULT_QUANTILES,
    levels: Sequence[float] = band_levels.DEFAULT_LEVELS,
    event_windows: Sequence[preprocess.Window] | None = None,
    masked: np.ndarray | None = None,
    filled: np.ndarray | None = None,
    start: Any = None,
    candidates: Sequence[str] | None = None,
    generated: Any = None,
    options: Options | None = None,
) -> BatchForecast:
    """Forecast every series ``horizon`` steps past its end.

    ``y`` is an (N, T) array (then ``step`` is required and ``start``, the first
    sample's instant, places instant event windows and the result) or a list of
    ``Series`` (their gap-filled points are left out of scoring). ``event_windows``
    are past planned events, as index or instant pairs, masked in every series;
    ``masked`` adds an (N, T) mask of its own. ``candidates`` limits ``auto`` (default:
    every registered method). ``levels`` are the quantile levels written beside the
    band (``()``: none). Series may differ in length; they are processed in groups of
    equal length and season.
    """
    opt = options or Options()
    q = bands.check_quantiles(quantiles)
    lv = band_levels.check_levels(levels)
    if isinstance(step, str):
        step = parse_duration(step, field="step")
    rows, dt, info = _rows(y, None if step is None else pd.Timedelta(step), filled, start)
    n = len(rows)
    h = steps(horizon, dt, "horizon")
    if h < 1:
        raise InputError(f"horizon must be at least one step, got {h}")
    pooled = method in ("auto", combine.COMBINATION)
    names = (method,) if not pooled else tuple(candidates or forecasting.METHODS)
    for name in names:
        forecasting.method(name)  # an unknown name fails before any work
    seasons = _season(season, rows, dt)
    out = np.zeros((3 + len(lv), n, h))  # point, lower, upper, each level
    meta: list[dict[str, Any]] = [{} for _ in range(n)]
    key = [(len(r), int(s)) for r, s in zip(rows, seasons, strict=True)]
    for t_len, s in sorted(set(key)):
        idx = np.flatnonzero([k == (t_len, s) for k in key])
        filled_ = np.zeros((len(idx), t_len), dtype=bool)
        masked_ = np.zeros((len(idx), t_len), dtype=bool)
        for j, i in enumerate(idx):
            if info["filled"][i] is not None:
                filled_[j] = info["filled"][i]
            masked_[j] = preprocess.event_mask(
                t_len, event_windows, start=info["start"][i], step=dt
            )
        if masked is not None:
            masked_ |= np.broadcast_to(np.asarray(masked, dtype=bool), (n, t_len))[idx]
        out[:, idx], group_meta = _forecast_group(
            np.stack([rows[i] for i in idx]),
            filled_,
            masked_,
            names,
            auto=method == "auto",
            combined=method == combine.COMBINATION,
            season=s,
            horizon=h,
            step=dt,
            quantiles=q,
            levels=lv,
            opt=opt,
        )
        for j, i in enumerate(idx):
            meta[i] = group_meta[j]
    if not np.all(np.isfinite(out)):
        raise ForecastError("internal: non-finite forecast values")  # never NaN out
    return BatchForecast(
        point=out[0],
        lower=out[1],
        upper=out[2],
        method=tuple(m["method"] for m in meta),
        season=seasons,
        scores=tuple(m["scores"] for m in meta),
        meta=tuple(meta),
        quantiles=q,
        step=dt,
        start=tuple(
            None if t0 is None else t0 + dt * len(r)
            for t0, r in zip(info["start"], rows, strict=True)
        ),
        units=info["units"],
        generated=None if generated is None else pd.Timestamp(generated),
        sources=info["sources"],
        levels=lv,
        qvalues=out[3:].transpose(1, 0, 2) if lv else None,
    )


def _forecast_group(
    y: np.ndarray,
    filled: np.ndarray,
    masked: np.ndarray,
    names: tuple[str, ...],
    *,
    auto: bool,
    combined: bool = False,
    season: int,
    horizon: int,
    step: pd.Timedelta,
    quantiles: tuple[float, float],
    levels: tuple[float, ...] = (),
    opt: Options,
) -> tuple[np.ndarray, list[dict[str, Any]]]:
    """The whole pipeline for series that share length and season: (3 + L, N, H)
    (point, lower, upper, then each quantile level), meta."""
    n, t_len = y.shape
    prep = preprocess.prepare(
        y,
        season=season,
        filled=filled,
        masked=masked,
        clip=opt.clip,
        clip_k=opt.clip_k,
        clip_window=opt.clip_window,
        clip_how=opt.clip_how if opt.clip_how != "auto" else ("phase" if season else "rolling"),
        min_length=max(2, season),
    )
    valid = ~prep.excluded
    h_eval = max(1, min(horizon, steps(opt.max_eval_horizon, step, "evaluation horizon")))
    spacing = max(1, steps(opt.origin_spacing, step, "origin spacing"))
    at = evaluation.training_origins(t_len, h_eval, season, spacing, opt.origins)
    if at.size:
        sel = select(
            prep.values,
            names,
            season=season,
            horizon=h_eval,
            at=at,
            valid=valid,
            quantiles=quantiles,
            pool=opt.pool,
            combination=auto or combined,
        )
        if combined:
            sel = finalize.combination_first(sel)
    else:
        sel = unevaluated(names, n, prefer=FALLBACK_METHOD)
    names = sel.names
    point, final, why = finalize.final_forecasts(sel, prep.values, season=season, horizon=horizon)
    if (final < 0).any():
        detail = "; ".join(f"{k}: {v}" for k, v in why.items())
        raise ForecastError(
            f"series {np.flatnonzero(final < 0)[:5].tolist()} could not be "
            f"forecast by {', '.join(names)} ({detail})"
        )
    methods = [names[j] for j in final]
    where = {"pool": opt.pool, "start": t_len, "period": bands.phase_period(season),
             "calibration": sel.calibration}  # fmt: skip
    lo, hi, banded = bands.from_backtests(sel.backtests, methods, horizon, quantiles, **where)
    qo, _ = band_levels.level_offsets(sel.backtests, methods, horizon, levels, **where)
    if not banded.all():
        rest = np.flatnonzero(~banded)
        a, b = bands.insample_quantiles(prep.values[rest], season, valid[rest], quantiles)
        lo[rest], hi[rest] = a[:, None], b[:, None]
        qo[rest] = band_levels.insample_offsets(prep.values[rest], season, valid[rest],
                                                levels)[..., None]  # fmt: skip
    result = np.concatenate([np.stack(bands.apply_offsets(point, lo, hi)),
                             band_levels.apply_levels(point, qo, levels).transpose(1, 0, 2)])
    meta = []
    for i in range(n):
        picked = sel.evaluated[i] and final[i] == sel.order[i, 0]
        fixed = not auto and (not combined or methods[i] == combine.COMBINATION)
        meta.append(
            {
                "method": methods[i],
                **finalize.members(sel, i, methods[i]),
                "selection": "fixed" if fixed else "auto" if picked else "fallback",
                "season": int(season),
                "season_duration": format_duration(step * season) if season else None,
                "horizon": int(horizon),
                "quantiles": list(quantiles),
                "levels": list(levels),
                "bands": "rolling-origin" if banded[i] else "in-sample",
                "evaluation": {
                    "origins": int(at.size),
                    "horizon": int(h_eval),
                    "spacing": int(spacing),
                },
                "scores": sel.row_scores(i),
                "failures": sel.failed(i),
                "preprocess": {
                    "clipped": int(prep.clipped[i].sum()),
                    "masked": int(prep.masked[i].sum()),
                    "filled": int(prep.filled[i].sum()),
                },
            }
        )
    return result, meta


def forecast_series(
    series: Series,
    *,
    horizon: int | pd.Timedelta | str,
    method: str = "auto",
    season: str | int | pd.Timedelta | None = "auto",
    quantiles: tuple[float, float] = bands.DEFAULT_QUANTILES,
    event_windows: Sequence[preprocess.Window] | None = None,
    candidates: Sequence[str] | None = None,
    generated: Any = None,
    options: Options | None = None,
) -> Series:
    """One history in, one forecast ``Series`` out: it starts one step after the
    history ends and carries method, season, scores and quantiles in ``meta``."""
    result = forecast_batch(
        [series],
        horizon=horizon,
        method=method,
        season=season,
        quantiles=quantiles,
        event_windows=event_windows,
        candidates=candidates,
        generated=generated,
        options=options,
    )
    return result.series(0)
