"""The live level correction in the back-test: the operator's rule, replayed.

``floorcast.replay`` plans each floorcast row once without the correction and replays
it through the HPA model; this module then does what the operator does at every
reconcile (``core.correction``; docs/policy.md, "Live correction"):

* observe the load the HPA reports at the reconcile instant s — the usage of the
  sync interval before s, as ``core.hpa_model`` reads it — skipping instants within
  ``leadTime`` of the HPA's last scale (pods then counted in ``currentReplicas`` are
  not yet in the utilization average, so utilization × replicas would overstate the
  load); the operator skips on the HPA's ``status.lastScaleTime`` the same way;
* update the EWMA of observed and forecast load with it and read the clamped factor;
* set the floor from the factor × the window's need, never below the rule's keep.

Nothing here sees load after s: the observation is the demand before s, the scale
events come from the trace up to s, and the forecast in force at s was made at or
before s. The scale events are those of the uncorrected replay (one pass): the
corrected floors change when the HPA scales, so the skipped instants are an
approximation of the operator's, documented in docs/backtest.md.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from floorcast import plans
from floorcast.core import backtest as bt
from floorcast.core import correction, planning
from floorcast.policy import PolicySpec
from floorcast.replay_floors import Knobs, sized_loads

#: The operator's default reconcile interval (``floorcast run --interval``).
DEFAULT_INTERVAL = pd.Timedelta(seconds=30)


def window_needs(
    spec: PolicySpec,
    rolling: bt.Rolling,
    grid: Sequence[Knobs],
    *,
    per_replica: float,
    base_target: float,
    plan_step: pd.Timedelta,
    band: bool,
) -> np.ndarray:
    """(J, G, H) the largest un-rounded need in each instant's [−hold, +lead] window,
    on the planning grid, per forecast and configuration: what ``correction``
    multiplies by the factor. ``band``: the load the policy plans on (its upper band
    when it asks), else the forecast's value."""
    fine, ev = sized_on_grid(spec, rolling, grid, plan_step=plan_step, band=band)
    j_n, g_n, h = fine.shape
    out = np.empty((j_n, g_n, h))
    for g, k in enumerate(grid):
        per = per_replica * k.target / base_target
        need = fine[:, g] * ev * (1.0 + float(k.headroom)) / per
        lead = planning.window_steps(pd.Timedelta(k.lead), plan_step)
        hold = planning.window_steps(pd.Timedelta(k.hold), plan_step)
        out[:, g, :] = planning.sliding_max(need, hold, lead)
    return out


def sized_on_grid(spec: PolicySpec, rolling: bt.Rolling, grid: Sequence[Knobs], *,
                  plan_step: pd.Timedelta,
                  band: bool = True) -> tuple[np.ndarray, np.ndarray]:  # fmt: skip
    """((J, G, H) the load each forecast's floor is sized on, read on the planning grid
    as ``plans.refined_load`` reads it, per configuration; (J, H) the planned events'
    factor at each grid instant). ``band=False``: the forecast's value instead. Shared
    by the live correction's need and the guard's sized load, so both read the grid
    the planner does."""
    j_n, g_n = rolling.point.shape[0], len(grid)
    if band:
        sized = sized_loads(spec, rolling, grid).reshape(j_n * g_n, -1)
    else:
        sized = np.repeat(np.asarray(rolling.point, dtype=np.float64), g_n, axis=0)
    fine = planning.cover_intervals(
        planning.refine(sized, rolling.step, plan_step, centred=rolling.centred)
    ).reshape(j_n, g_n, -1)
    h = fine.shape[2]
    ev = np.ones((j_n, h))
    if spec.planned_events:
        ev = np.stack([
            plans.policy_event_factors(spec, pd.date_range(t, periods=h, freq=plan_step))
            for t in rolling.times
        ])  # fmt: skip
    return fine, ev


def at_syncs(
    sim_start: pd.Timestamp,
    sync: pd.Timedelta,
    n_steps: int,
    times: pd.DatetimeIndex,
    step: pd.Timedelta,
    values: np.ndarray,
) -> np.ndarray:
    """(G, T) from per-forecast (J, G, H) values: at each sync the newest forecast made
    at or before it, read at its grid step (``bt.assemble_floors`` without the cast)."""
    t = sim_start.value + np.arange(n_steps, dtype=np.int64) * pd.Timedelta(sync).value
    ft = times.as_unit("ns").asi8
    j = np.searchsorted(ft, t, side="right") - 1
    i = (t - ft[j]) // pd.Timedelta(step).value
    return values[j, :, i].T


def observations(
    demand: np.ndarray, scaled: np.ndarray, *, sync: pd.Timedelta, settle: pd.Timedelta
) -> np.ndarray:
    """(G, T) the load the HPA reports at each sync — the previous interval's usage,
    as ``hpa_model`` reads it — or NaN within ``settle`` of the row's last scale
    (and at the first sync, which has no interval before it)."""
    t_len = demand.shape[-1]
    prev = np.maximum(np.arange(t_len) - 1, 0)
    seen = np.broadcast_to(demand[prev], scaled.shape).astype(np.float64)
    w = max(planning.window_steps(pd.Timedelta(settle), sync), 1)
    c = np.concatenate([np.zeros((scaled.shape[0], 1)), np.cumsum(scaled, axis=1)], axis=1)
    recent = c[:, 1:] - c[:, np.maximum(np.arange(t_len) + 1 - w, 0)]  # scales in (k−w, k]
    out = np.where(recent > 0, np.nan, seen)
    out[:, 0] = np.nan
    return out


def correct(
    spec: PolicySpec,
    rolling: bt.Rolling,
    grid: Sequence[Knobs],
    bounds: plans.Bounds,
    *,
    planned: np.ndarray,
    demand: np.ndarray,
    scaled: np.ndarray,
    sim_start: pd.Timestamp,
    sync: pd.Timedelta,
    plan_step: pd.Timedelta,
    per_replica: float,
    base_target: float,
    interval: pd.Timedelta = DEFAULT_INTERVAL,
    keep_rule: str = correction.KEEP,
) -> tuple[np.ndarray, np.ndarray]:
    """The corrected floors (G, T) of the floorcast rows and their factor (G, T; NaN
    while there is not enough evidence). ``planned`` and ``scaled`` are the rows'
    uncorrected floors and scale events."""
    lc = spec.live_correction
    n = planned.shape[1]
    kw = {"per_replica": per_replica, "base_target": base_target, "plan_step": plan_step}
    need = at_syncs(sim_start, sync, n, rolling.times, plan_step,
                    window_needs(spec, rolling, grid, band=True, **kw))  # fmt: skip
    point = planning.refine(rolling.point, rolling.step, plan_step, centred=rolling.centred)
    fc_now = at_syncs(sim_start, sync, n, rolling.times, plan_step, point[:, None, :])
    obs = observations(demand, scaled, sync=sync, settle=pd.Timedelta(spec.lead_time))
    every = max(round(pd.Timedelta(interval) / sync), 1)
    ticks = np.arange(0, n, every)
    per = np.array([per_replica * k.target / base_target for k in grid])
    f = correction.track(obs[:, ticks], np.broadcast_to(fc_now[:, ticks], obs[:, ticks].shape),
                         every * sync.total_seconds(),
                         pd.Timedelta(lc.half_life).total_seconds(),
                         low=lc.low, high=lc.high, min_level=per)  # fmt: skip
    f_sync = f[:, np.arange(n) // every]
    if keep_rule == "plan":
        keep = planned
    elif keep_rule == "value":
        val = at_syncs(sim_start, sync, n, rolling.times, plan_step,
                       window_needs(spec, rolling, grid, band=False, **kw))  # fmt: skip
        keep = np.maximum(np.minimum(planning.ceil_replicas(val), bounds.ceiling), bounds.lower)
    elif keep_rule == "lower":
        keep = np.full_like(planned, bounds.lower)
    else:
        raise ValueError(f"unknown keep rule {keep_rule!r}; expected {correction.KEEP_RULES}")
    fixed = correction.corrected_floor(planned, need, f_sync, keep=keep,
                                       lower=bounds.lower, ceiling=bounds.ceiling)  # fmt: skip
    return fixed, f_sync
