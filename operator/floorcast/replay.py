"""Policy + history + HPA settings -> the three back-test scenarios (and a sweep).

The glue between ``core.backtest`` / ``core.hpa_model`` and the policy: floors are
planned with ``plans.bounds_for`` / ``plans.planning_load`` /
``plans.policy_event_factors`` and ``core.planning.plan`` — exactly what
``plans.plan_policy`` (and so the operator) does — but for every forecast and every
sweep point in one vectorized call.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import timedelta
from typing import Any

import numpy as np
import pandas as pd

from floorcast import plans
from floorcast.core import backtest as bt
from floorcast.core import hpa_model, planning
from floorcast.core.series import Series
from floorcast.errors import InputError
from floorcast.policy import PolicySpec

Progress = Callable[[str], None]
#: How many times ``run`` reports progress (one call as each phase starts).
PHASES = 3
_DAY = pd.Timedelta(days=1)
_FIVE_MIN = pd.Timedelta(minutes=5)


@dataclass(frozen=True)
class Setup:
    """How to replay: the HPA being modelled and the forecasting cadence."""

    baseline: int
    hpa_max: int
    target_utilization: float  # fraction
    per_replica: float
    scale_up: hpa_model.ScalingRules = hpa_model.DEFAULT_SCALE_UP
    scale_down: hpa_model.ScalingRules = hpa_model.DEFAULT_SCALE_DOWN
    #: Time from creating a pod until it serves; default: the policy's leadTime.
    pod_startup: timedelta | None = None
    method: str = "auto"
    season: Any = "auto"
    cadence: pd.Timedelta = _DAY
    min_train: pd.Timedelta = 7 * _DAY
    lookback: pd.Timedelta = 14 * _DAY
    forecast_step: pd.Timedelta = _FIVE_MIN
    start: pd.Timestamp | None = None
    end: pd.Timestamp | None = None


@dataclass(frozen=True, eq=False)
class Result:
    """Everything the CLI prints, the JSON holds and the report draws."""

    start: pd.Timestamp
    end: pd.Timestamp
    sync: pd.Timedelta
    demand: np.ndarray  # (T,) on the sync grid
    names: tuple[str, ...]  # row names: reactive, static_peak, floorcast, sweep...
    minimum: np.ndarray  # (B, T) minReplicas per row
    trace: hpa_model.Trace
    scores: list[dict[str, Any]]
    forecast_error: dict[str, Any]
    static_floor: int
    bounds: plans.Bounds
    pod_startup: timedelta
    per_replica: float = 1.0
    sweep: list[dict[str, Any]] = field(default_factory=list)

    def row(self, name: str) -> int:
        return self.names.index(name)


def run(
    spec: PolicySpec,
    history: Series,
    setup: Setup,
    *,
    sweep: Sequence[tuple[timedelta, float]] = (),
    progress: Progress | None = None,
) -> Result:
    """Replay ``history`` for the policy; ``sweep`` adds one floorcast row per
    (leadTime, headroom) pair. Pods take ``pod_startup`` to serve in every row: the
    swept leadTime is the planner's, the workload's start-up time is a fact."""
    say = progress or (lambda _msg: None)
    sync = pd.Timedelta(seconds=hpa_model.DEFAULT_SYNC_SECONDS)
    if setup.per_replica <= 0:
        raise InputError(f"per-replica capacity must be > 0, got {setup.per_replica}")
    if not 0 < setup.target_utilization <= 10:
        raise InputError(
            f"target utilization must be in (0, 1000] %, got {setup.target_utilization:.0%}"
        )
    bounds = plans.bounds_for(spec, baseline=setup.baseline, hpa_max=setup.hpa_max)
    startup = setup.pod_startup if setup.pod_startup is not None else spec.lead_time
    fstep = max(setup.forecast_step, history.step)
    times = bt.forecast_times(
        history, cadence=setup.cadence, min_train=setup.min_train, start=setup.start, end=setup.end
    )
    start = times[0]
    end = (
        history.end + history.step
        if setup.end is None
        else min(setup.end, history.end + history.step)
    )
    grid = [(spec.lead_time, spec.headroom), *sweep]
    max_lead = max(pd.Timedelta(g[0]) for g in grid)
    horizon = setup.cadence + max_lead + 2 * fstep
    say(f"forecasting {len(times)} times ({setup.method})")
    events = [(e.start, e.end) for e in spec.planned_events]
    rolling = bt.rolling_forecasts(
        history,
        times,
        step=fstep,
        horizon=horizon,
        lookback=setup.lookback,
        method=setup.method,
        season=setup.season,
        event_windows=[w for w in events if w[0] < end] or None,
    )
    say("planning floors")
    floors = _floors(spec, rolling, grid, bounds, setup.per_replica)
    demand = bt.sim_demand(history, start, end, sync)
    n = len(demand)
    floor_rows = bt.assemble_floors(start, sync, n, times, rolling.step, floors)
    # The common manual fix: one static minReplicas sized for the window's peak with
    # the policy's headroom. It knows the peak in advance (an oracle), so it is the
    # best a static floor can do for capacity, and shows what that costs.
    peak = float(demand.max())
    static = int(
        planning.required_replicas(np.array([[peak]]), setup.per_replica, spec.headroom)[0, 0]
    )
    static = int(np.clip(static, bounds.lower, bounds.ceiling))
    mins = np.vstack([np.full((1, n), bounds.baseline), np.full((1, n), static), floor_rows])
    names = ("reactive", "static_peak", "floorcast", *[f"sweep{i}" for i in range(len(sweep))])
    say(f"simulating {len(names)} scenarios over {n} HPA syncs")
    hpa = hpa_model.HpaConfig(
        max_replicas=max(setup.hpa_max, setup.baseline),
        target_utilization=setup.target_utilization,
        scale_up=setup.scale_up,
        scale_down=setup.scale_down,
    )
    delay = planning.window_steps(pd.Timedelta(startup), sync)
    trace = hpa_model.simulate(
        demand, mins, per_replica=setup.per_replica, hpa=hpa, ready_delay_steps=delay
    )
    scores = bt.metrics(
        trace, demand, per_replica=setup.per_replica, target=setup.target_utilization, sync=sync
    )
    err = bt.forecast_error(rolling, history, end)
    table = [
        {"leadTime": pd.Timedelta(lead), "headroom": float(head), **scores[3 + i]}
        for i, (lead, head) in enumerate(sweep)
    ]
    return Result(
        start=start,
        end=end,
        sync=sync,
        demand=demand,
        names=names,
        minimum=mins,
        trace=trace,
        scores=scores,
        forecast_error=err,
        static_floor=static,
        bounds=bounds,
        pod_startup=startup,
        per_replica=setup.per_replica,
        sweep=table,
    )


def _floors(
    spec: PolicySpec,
    rolling: bt.Rolling,
    grid: Sequence[tuple[timedelta, float]],
    bounds: plans.Bounds,
    per_replica: float,
) -> np.ndarray:
    """(J, G, H) floors: every forecast × every (leadTime, headroom), one planner call.

    The load is the band the policy plans on and the event factors are the policy's,
    both through ``plans``; rows are index-based in the planner, so forecasts made at
    different times can share one call.
    """
    j_n, h = rolling.point.shape
    g_n = len(grid)
    sized = [
        plans.planning_load(
            spec,
            Series(start=t, step=rolling.step, values=p, lower=p, upper=u),
        )
        for t, p, u in zip(rolling.times, rolling.point, rolling.upper, strict=True)
    ]
    load = np.repeat(np.stack(sized), g_n, axis=0)  # (J*G, H), forecast-major
    factors = np.stack(
        [
            plans.policy_event_factors(spec, pd.date_range(t, periods=h, freq=rolling.step))
            for t in rolling.times
        ]
    )
    factors = np.repeat(factors, g_n, axis=0)
    heads = np.tile([float(g[1]) for g in grid], j_n)
    leads = [pd.Timedelta(g[0]) for g in grid] * j_n
    sched = planning.plan(
        rolling.times[0],
        rolling.step,
        load,
        per_replica=per_replica,
        headroom=heads,
        lead=leads,
        hold=pd.Timedelta(spec.hold_time),
        lower=bounds.lower,
        ceiling=bounds.ceiling,
        event_factor=factors,
    )
    return sched.floor.reshape(j_n, g_n, h)
