"""Replay recorded load: the reactive HPA alone, with floorcast's floors, and with a
static peak-sized floor, scored side by side.

The floors must come from forecasts that could have existed at the time, or the
back-test flatters floorcast: each forecast here is made only from history strictly
before its forecast time (``rolling_forecasts``), and each floor in force at time s
comes from the newest forecast made at or before s (``assemble_floors``). Pure
numpy/pandas: the policy-specific choices (band, events, bounds) come from the
caller (``floorcast.replay``), so the backtest and the operator plan alike.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from floorcast.core.forecasting import engine, evaluation
from floorcast.core.hpa_model import Trace
from floorcast.core.series import Series, resample
from floorcast.errors import InputError


def sim_demand(
    history: Series, start: pd.Timestamp, end: pd.Timestamp, sync: pd.Timedelta
) -> np.ndarray:
    """Load on the HPA's sync grid [start, end), read off the straight line between
    recorded samples (what the issue asks for; a step-wise hold would add steps the
    recording never had). Instants past the last sample keep its value."""
    t = pd.date_range(start, end, freq=sync, inclusive="left")
    if len(t) == 0:
        raise InputError(f"nothing to simulate between {start} and {end}", source=history.source)
    x = history.times.as_unit("ns").asi8
    return np.interp(t.as_unit("ns").asi8, x, np.asarray(history.values, dtype=np.float64))


def forecast_times(
    history: Series,
    *,
    cadence: pd.Timedelta,
    min_train: pd.Timedelta,
    start: pd.Timestamp | None = None,
    end: pd.Timestamp | None = None,
) -> pd.DatetimeIndex:
    """Re-forecast instants, aligned to the cadence on the epoch (daily: 00:00 UTC),
    from the first one with ``min_train`` of history before it up to ``end``."""
    first = history.start + min_train
    if start is not None:
        if start < first:
            raise InputError(
                f"--start {start.isoformat()} leaves less than {min_train} of history "
                f"before it (history starts {history.start.isoformat()})",
                source=history.source,
            )
        first = start
    stop = history.end + history.step if end is None else min(end, history.end + history.step)
    step_ns = pd.Timedelta(cadence).value
    f0 = pd.Timestamp(-(-first.value // step_ns) * step_ns, tz="UTC")
    if start is not None:
        f0 = start
    out = pd.date_range(f0, stop, freq=cadence, inclusive="left")
    if len(out) == 0:
        raise InputError(
            f"history from {history.start.isoformat()} to {history.end.isoformat()} is too "
            f"short: a back-test needs {min_train} of training data plus time to replay",
            source=history.source,
        )
    return out


@dataclass(frozen=True, eq=False)
class Rolling:
    """One forecast per forecast time, all on one step and horizon."""

    times: pd.DatetimeIndex  # forecast instants (each forecast starts here)
    step: pd.Timedelta
    point: np.ndarray  # (J, H)
    upper: np.ndarray  # (J, H)
    method: tuple[str, ...]
    season: np.ndarray  # (J,) steps
    train: list[np.ndarray]  # each forecast's training values (for MASE)
    #: Each point is the mean of the step it labels (resampled), not a sample.
    centred: bool = False
    #: The forecasts' quantiles (docs/formats.md, "Quantiles"), (J, L, H), so a
    #: policy's ``serviceLevel`` is replayed as the operator plans it; none: L = 0.
    levels: tuple[float, ...] = ()
    quantiles: np.ndarray | None = None

    def forecast(self, j: int) -> Series:
        """Forecast ``j`` as the operator would read it from its file."""
        p = self.point[j]
        q = None if self.quantiles is None else self.quantiles[j]
        return Series(start=self.times[j], step=self.step, values=p, lower=p,
                      upper=self.upper[j], levels=self.levels if q is not None else (),
                      quantiles=q)  # fmt: skip


def rolling_forecasts(
    history: Series,
    times: pd.DatetimeIndex,
    *,
    step: pd.Timedelta,
    horizon: pd.Timedelta,
    lookback: pd.Timedelta,
    method: str = "auto",
    season: Any = "auto",
    event_windows: Sequence[tuple[pd.Timestamp, pd.Timestamp]] | None = None,
) -> Rolling:
    """Forecast from each time in ``times`` using only samples strictly before it.

    All forecasts go to the engine in one batch (it groups equal-length rows), and
    each row is the history in [t − lookback, t) on the forecast step: a coarser step
    than the recording's is what forecasts are stored at and keeps this fast.
    """
    coarse = resample(history, step, how="mean") if step > history.step else history
    rows = []
    for t in times:
        # Bins are labelled by their left edge and t is on the step, so every sample
        # in a bin before t is itself before t: no look-ahead through resampling.
        w = coarse.slice(t - lookback, t)
        if len(w) < 2:
            raise InputError(
                f"no history before forecast time {t.isoformat()}", source=history.source
            )
        rows.append(w)
    h = int(np.ceil(horizon / step - 1e-9))
    bf = engine.forecast_batch(
        rows, horizon=h, method=method, season=season, event_windows=event_windows
    )
    return Rolling(
        times=times,
        step=step,
        point=bf.point,
        upper=bf.upper,
        method=bf.method,
        season=np.asarray(bf.season),
        train=[np.asarray(r.values) for r in rows],
        centred=step > history.step,
        levels=bf.levels,
        quantiles=bf.qvalues,
    )


def oracle_forecasts(history: Series, times: pd.DatetimeIndex, *, horizon: pd.Timedelta) -> Rolling:
    """Perfect foresight: each "forecast" is the load that really followed its time,
    on the recording's own step (no averaging that would hide a peak).

    For reference only — no forecaster can see the future — it shows what the
    planner itself can reach, and a live correction or a better forecaster can be
    measured by the share of the oracle's saving it captures. Instants past the
    last sample keep its value, as ``sim_demand`` does.
    """
    step = history.step
    h = int(np.ceil(horizon / step - 1e-9))
    first = ((times - history.start) // step).to_numpy(dtype=np.int64)
    idx = np.clip(first[:, None] + np.arange(h)[None, :], 0, len(history) - 1)
    actual = np.asarray(history.values, dtype=np.float64)[idx]
    return Rolling(
        times=times,
        step=step,
        point=actual,
        upper=actual,
        method=("oracle",) * len(times),
        season=np.zeros(len(times), dtype=np.int64),
        train=[],
    )


def forecast_error(rolling: Rolling, history: Series, end: pd.Timestamp) -> dict[str, Any]:
    """MAE and MASE of the part of each forecast the floors were built from.

    MASE divides by each training window's in-sample seasonal-naive MAE (Hyndman &
    Koehler 2006, via ``evaluation.mase``); the figure is the mean over forecasts.
    Coverage is the share of actual points at or below the upper band the floor is
    usually sized on.
    """
    coarse = resample(history, rolling.step, how="mean") if rolling.step > history.step else history
    nxt = [*rolling.times[1:], end]
    errs, mases, covered, count = [], [], 0, 0
    for j, (t0, t1) in enumerate(zip(rolling.times, nxt, strict=True)):
        act = np.asarray(coarse.slice(t0, t1).values)
        m = min(len(act), rolling.point.shape[1])
        if m == 0:
            continue
        f = rolling.point[j, :m]
        errs.append(np.abs(act[:m] - f))
        covered += int(np.sum(act[:m] <= rolling.upper[j, :m] + 1e-12))
        count += m
        mases.append(
            float(
                evaluation.mase(
                    act[None, :m], f[None, :], rolling.train[j][None, :], int(rolling.season[j])
                )[0]
            )
        )
    if not errs:
        return {"mae": None, "mase": None, "upper_coverage": None, "forecasts": 0}
    finite = [x for x in mases if np.isfinite(x)]
    return {
        "mae": float(np.mean(np.concatenate(errs))),
        "mase": float(np.mean(finite)) if finite else None,
        "upper_coverage": covered / count,
        "forecasts": len(errs),
        "methods": sorted(set(rolling.method)),
    }


def assemble_floors(
    sim_start: pd.Timestamp,
    sync: pd.Timedelta,
    n_steps: int,
    times: pd.DatetimeIndex,
    step: pd.Timedelta,
    floors: np.ndarray,
) -> np.ndarray:
    """minReplicas per sync step from per-forecast floor schedules (J, G, H): at each
    instant the newest forecast made at or before it decides, read at its grid step."""
    t = sim_start.value + np.arange(n_steps, dtype=np.int64) * pd.Timedelta(sync).value
    ft = times.as_unit("ns").asi8
    j = np.searchsorted(ft, t, side="right") - 1
    if np.any(j < 0):
        raise ValueError("the simulation starts before the first forecast")
    i = (t - ft[j]) // pd.Timedelta(step).value
    if np.any(i >= floors.shape[2]):
        raise ValueError("a forecast ends before the next one is made")
    return floors[j, :, i].T.astype(np.int64)  # (G, T)


def metrics(
    trace: Trace,
    demand: np.ndarray,
    *,
    per_replica: float,
    target: float | np.ndarray,
    sync: pd.Timedelta,
) -> list[dict[str, Any]]:
    """The figures the CLI contract names, per row of the trace.

    Capacity at 100 % of a ready pod is per_replica / target (per_replica is what it
    carries at the target); ``under_capacity_minutes`` — saturation — counts the
    minutes whose demand is above that capacity of the ready pods. ``replica_hours``
    counts every existing pod, ready or not: a starting pod already holds its node
    reservation and costs the same. ``demand`` may be (T,) or one row per trace row
    and ``target`` one per row (``core.frontier`` explains why a row at another target
    is its demand scaled by the target ratio).
    """
    dt_min = pd.Timedelta(sync).total_seconds() / 60.0
    ready = trace.ready.astype(np.float64)
    dem = np.broadcast_to(np.asarray(demand, dtype=np.float64), ready.shape)
    tgt = np.broadcast_to(np.asarray(target, dtype=np.float64), (ready.shape[0],))[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        util = np.where(ready > 0, tgt * dem / (ready * per_replica), np.where(dem > 0, np.inf, 0))
    under = dem > ready * per_replica / tgt
    over = util > tgt
    out = []
    for b in range(ready.shape[0]):
        out.append(
            {
                "under_capacity_minutes": float(np.sum(under[b]) * dt_min),
                "over_target_minutes": float(np.sum(over[b]) * dt_min),
                "replica_hours": float(trace.replicas[b].sum() * dt_min / 60.0),
                "peak_utilization": float(util[b].max()) if util.shape[1] else 0.0,
                "scale_events": int(trace.scaled[b].sum()),
                "mean_replicas": float(trace.replicas[b].mean()),
                "max_replicas": int(trace.replicas[b].max()),
            }
        )
    return out
