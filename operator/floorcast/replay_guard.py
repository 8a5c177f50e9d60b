"""The accuracy guard in the back-test: the operator's guard, replayed.

``floorcast.replay`` plans each floorcast row (and applies the live correction when
the policy asks); this module then does what the operator does at every reconcile
(``controller/accuracy.py``; docs/policy.md, "Accuracy guard"):

* observe, at each reconcile instant s (every ``interval``, as ``replay_live``), the
  load the HPA reports — the usage of the sync interval before s, as
  ``core.hpa_model`` reads it, skipped within ``leadTime`` of the row's last scale
  (``replay_live.observations``) —, the forecast's value in force at s (the
  operator's ``plans.point_at``) and the load the floor was sized for at s (the
  planning load × event factor × (1 + headroom), the operator's
  ``accuracy.sized_load``);
* feed them through ``core.guard`` — the functions the operator calls, so operator
  and back-test cannot drift — with the policy's thresholds, or the row's swept ones;
* while the guard is tripped, set the row's floor to the policy's lower bound
  (``action: Baseline``) or keep the live-corrected floor while the live correction
  has a factor (``action: LiveCorrected``), as the operator does.

Nothing here sees load after s: the observation is the demand before s, the scale
events come from the trace up to s, and the forecast in force at s was made at or
before s. As for the live correction, the scale events are those of the replay
without the guard (one pass); docs/backtest.md says so.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from floorcast import plans, replay_live
from floorcast.core import backtest as bt
from floorcast.core import guard, planning
from floorcast.policy import PolicySpec
from floorcast.replay_floors import Knobs


def guarded(spec: PolicySpec, k: Knobs) -> bool:
    """Does this row replay the guard: the policy enables it, or the row sets a
    threshold (a ``--sweep`` of ``maxError`` / ``maxExceedance``)."""
    return spec.accuracy_guard.enabled or k.max_error is not None or k.max_exceedance is not None


def thresholds(spec: PolicySpec, k: Knobs) -> tuple[float, float]:
    """(maxError, maxExceedance) of a row: its own when swept, else the policy's."""
    g = spec.accuracy_guard
    return (g.max_error if k.max_error is None else float(k.max_error),
            g.max_exceedance if k.max_exceedance is None else float(k.max_exceedance))  # fmt: skip


def settings(spec: PolicySpec, grid: Sequence[Knobs], per: np.ndarray) -> guard.Settings:
    """The guard's settings for the rows of ``grid``; ``per`` (G,) each row's
    per-replica load, the operator's ``min_level``. One window for all rows (the
    guard's memory is shaped by it; the window is not swept)."""
    g = spec.accuracy_guard
    th = np.array([thresholds(spec, k) for k in grid], dtype=np.float64).reshape(-1, 2)
    return guard.Settings(window=pd.Timedelta(g.window).total_seconds(), max_error=th[:, 0],
                          max_exceedance=th[:, 1],
                          recover_after=pd.Timedelta(g.recover_after).total_seconds(),
                          min_level=np.asarray(per, dtype=np.float64))  # fmt: skip


def sized_for(spec: PolicySpec, rolling: bt.Rolling, grid: Sequence[Knobs], *,
              plan_step: pd.Timedelta) -> np.ndarray:  # fmt: skip
    """(J, G, H) what each forecast's floor was sized for on the planning grid, per
    configuration: the planning load (``plans.planning_load``, read on the grid as
    ``plans.refined_load`` does) × event factor × (1 + headroom) — the operator's
    ``controller.accuracy.sized_load``."""
    fine, ev = replay_live.sized_on_grid(spec, rolling, grid, plan_step=plan_step)
    head = 1.0 + np.array([float(k.headroom) for k in grid])
    return fine * ev[:, None, :] * head[None, :, None]


@dataclass(frozen=True)
class Observations:
    """What the guard sees at each reconcile instant, per row."""

    ticks: np.ndarray  # (K,) sync index of each reconcile
    seconds: np.ndarray  # (K,) its instant, seconds since the epoch
    actual: np.ndarray  # (G, K) the load the HPA reports (NaN: unusable)
    forecast: np.ndarray  # (G, K) the forecast's value in force
    sized: np.ndarray  # (G, K) the load the floor was sized for


def observe(
    spec: PolicySpec,
    rolling: bt.Rolling,
    grid: Sequence[Knobs],
    *,
    demand: np.ndarray,
    scaled: np.ndarray,
    sim_start: pd.Timestamp,
    sync: pd.Timedelta,
    plan_step: pd.Timedelta,
    interval: pd.Timedelta = replay_live.DEFAULT_INTERVAL,
) -> Observations:
    """The guard's observations of the rows whose scale events are ``scaled`` (G, T),
    at every ``interval`` from ``sim_start``, each from data up to its instant."""
    n = scaled.shape[1]
    every = max(round(pd.Timedelta(interval) / sync), 1)
    ticks = np.arange(0, n, every)
    point = planning.refine(rolling.point, rolling.step, plan_step, centred=rolling.centred)
    fc = replay_live.at_syncs(sim_start, sync, n, rolling.times, plan_step, point[:, None, :])
    up = replay_live.at_syncs(sim_start, sync, n, rolling.times, plan_step,
                              sized_for(spec, rolling, grid, plan_step=plan_step))  # fmt: skip
    obs = replay_live.observations(demand, scaled, sync=sync, settle=pd.Timedelta(spec.lead_time))
    secs = (sim_start.value + ticks * pd.Timedelta(sync).value) / 1e9
    return Observations(ticks, secs, obs[:, ticks],
                        np.broadcast_to(fc[:, ticks], obs[:, ticks].shape).copy(),
                        up[:, ticks])  # fmt: skip


@dataclass(frozen=True, eq=False)
class Replayed:
    """The guard replayed on some floorcast rows, every array (R, T) on the sync grid
    (each reconcile's verdict holds until the next one)."""

    rows: tuple[int, ...]  # indices into the replayed grid
    tripped: np.ndarray  # bool
    error: np.ndarray  # the window's WAPE (NaN: no load to divide by)
    exceedance: np.ndarray  # share of observed time above the sized load
    judged: np.ndarray  # bool: enough evidence and load to judge
    floors: np.ndarray  # int, the floors with the guard
    #: Filled by ``floorcast.replay``: each row's scores without the guard.
    without: list[dict[str, Any]] = field(default_factory=list)


def replay(
    spec: PolicySpec,
    rolling: bt.Rolling,
    grid: Sequence[Knobs],
    bounds: plans.Bounds,
    *,
    current: np.ndarray,
    demand: np.ndarray,
    scaled: np.ndarray,
    sim_start: pd.Timestamp,
    sync: pd.Timedelta,
    plan_step: pd.Timedelta,
    per_replica: float,
    base_target: float,
    interval: pd.Timedelta = replay_live.DEFAULT_INTERVAL,
    factor: np.ndarray | None = None,
    rows: Sequence[int] | None = None,
) -> Replayed:
    """The guard on the grid rows ``rows`` (default: every row ``guarded`` says).

    ``current`` (G, T) the floors in force without the guard (live-corrected when the
    policy corrects), ``scaled`` (G, T) their scale events, ``factor`` (G, T) the live
    correction's factor (NaN: no evidence) or None when the policy does not correct."""
    pick = [g for g, k in enumerate(grid) if guarded(spec, k)] if rows is None else list(rows)
    n = current.shape[1]
    if not pick:
        empty = np.zeros((0, n))
        return Replayed((), empty.astype(bool), empty, empty, empty.astype(bool),
                        empty.astype(np.int64))  # fmt: skip
    sub = [grid[g] for g in pick]
    o = observe(spec, rolling, sub, demand=demand, scaled=scaled[pick], sim_start=sim_start,
                sync=sync, plan_step=plan_step, interval=interval)  # fmt: skip
    per = np.array([per_replica * k.target / base_target for k in sub])
    tripped, r = guard.track_readings(o.actual, o.forecast, o.sized, o.seconds,
                                      settings(spec, sub, per))  # fmt: skip
    every = o.ticks[1] - o.ticks[0] if len(o.ticks) > 1 else 1
    hold = np.minimum(np.arange(n) // every, len(o.ticks) - 1)
    trip = tripped[:, hold]
    now = current[pick]
    fallback = np.full_like(now, bounds.lower)
    if spec.accuracy_guard.action == "LiveCorrected" and factor is not None:
        fallback = np.where(np.isfinite(factor[pick]), now, bounds.lower)
    judged = (r.verdict != guard.UNJUDGED)[:, hold]
    return Replayed(tuple(pick), trip, r.error[:, hold], r.exceedance[:, hold], judged,
                    np.where(trip, fallback, now))  # fmt: skip


def summary(rep: Replayed, i: int, sync: pd.Timedelta) -> dict[str, Any]:
    """One guarded row's figures for ``backtest --json`` (docs/cli.md): how much of the
    time it was tripped, how often it tripped, how often it could judge and the
    spread of the judged figures — the history a threshold is picked from."""
    t, j = rep.tripped[i], rep.judged[i]

    def pct(x: np.ndarray, q: float) -> float | None:
        return float(np.percentile(x[j], q)) if j.any() else None

    out = {
        "tripped_share": float(t.mean()) if t.size else 0.0,
        "trips": int(np.sum(t[1:] & ~t[:-1]) + (t[0] if t.size else 0)),
        "tripped_minutes": float(t.sum() * pd.Timedelta(sync).total_seconds() / 60.0),
        "judged_share": float(j.mean()) if j.size else 0.0,
        "error_p50": pct(rep.error[i], 50),
        "error_p90": pct(rep.error[i], 90),
        "exceedance_p50": pct(rep.exceedance[i], 50),
        "exceedance_p90": pct(rep.exceedance[i], 90),
    }
    if rep.without:
        out["without_guard"] = rep.without[i]
    return out
