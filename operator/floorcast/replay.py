"""Policy + history + HPA settings -> the back-test scenarios, scored side by side.

Rows: the HPA alone, a static peak floor, floorcast with the policy's settings, the
perfect-foresight oracle (reference only), each ``--sweep`` point, and the HPA alone
at a ladder of lower targets (``core.frontier``), so the report can say what
floorcast saves against simply lowering the target, at equal saturation. Floors
come from ``replay_floors`` (the operator's planning rule, for every forecast and
row in one call) and every row goes through one vectorized ``hpa_model.simulate``;
the floorcast rows are replayed again with the live correction (``replay_live``) and
the accuracy guard (``replay_guard``) when the policy or the sweep asks.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from datetime import timedelta
from typing import Any

import numpy as np
import pandas as pd

from floorcast import plans, replay_guard, replay_live
from floorcast.core import backtest as bt
from floorcast.core import correction, frontier, hpa_model, planning
from floorcast.core.series import Series
from floorcast.durations import format_duration
from floorcast.errors import InputError
from floorcast.policy import PolicySpec
from floorcast.replay_floors import Knobs, floors, plan_step_for

__all__ = ["PHASES", "Knobs", "Result", "Setup", "run"]

Progress = Callable[[str], None]
#: Turns the rolling forecasts into the ones floors are planned from. The plug-in
#: point for a live correction: it sees each forecast's time and may use history
#: strictly before it (``--cadence`` sets how often a forecast is re-made).
Adjust = Callable[[bt.Rolling, Series], bt.Rolling]
#: How many times ``run`` reports progress (one call as each phase starts).
PHASES = 3
_DAY = pd.Timedelta(days=1)
_FIVE_MIN = pd.Timedelta(minutes=5)
_SYNC = pd.Timedelta(seconds=hpa_model.DEFAULT_SYNC_SECONDS)


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
    #: Grid the need is planned on; default the operator's (``planning.plan_resolution``).
    plan_step: pd.Timedelta | None = None
    #: HPA-alone ladder targets (fractions); default base target down to 10 %.
    ladder: tuple[float, ...] | None = None
    adjust: Adjust | None = None
    #: The operator's reconcile interval: how often the live correction observes.
    interval: pd.Timedelta = replay_live.DEFAULT_INTERVAL
    #: How low a live-correction factor below 1 may take the floor; default the
    #: operator's rule (``core.correction.KEEP``). For measuring the alternatives.
    correction_keep: str | None = None


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
    target: float = 0.8  # the HPA's base target
    targets: np.ndarray = field(default_factory=lambda: np.zeros(0))  # (B,) per row
    #: HPA alone at each ladder target, highest first: {target_utilization, metrics}.
    ladder: list[dict[str, Any]] = field(default_factory=list)
    #: Per floorcast-like row name: the equal-saturation HPA alone and the saving.
    tuned: dict[str, dict[str, Any]] = field(default_factory=dict)
    plan_step: pd.Timedelta = _SYNC
    #: (G, T) the live-correction factor of each floorcast row (NaN without enough
    #: evidence), or None when the policy does not correct.
    live_factor: np.ndarray | None = None
    #: The accuracy guard on the floorcast rows that replay it (``replay_guard``;
    #: ``rows`` index the grid: 0 the policy's own row, i + 1 sweep point i), or None.
    guard: replay_guard.Replayed | None = None

    def row(self, name: str) -> int:
        return self.names.index(name)


def run(
    spec: PolicySpec,
    history: Series,
    setup: Setup,
    *,
    sweep: Sequence[Knobs | tuple[timedelta, float]] = (),
    progress: Progress | None = None,
) -> Result:
    """Replay ``history`` for the policy; ``sweep`` adds one floorcast row per
    configuration ((leadTime, headroom) pairs keep the policy's hold and the base
    target). Pods take ``pod_startup`` to serve in every row: the swept leadTime is
    the planner's, the workload's start-up time is a fact."""
    say = progress or (lambda _msg: None)
    sync = pd.Timedelta(seconds=hpa_model.DEFAULT_SYNC_SECONDS)
    _check(setup)
    base = setup.target_utilization
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
    own = Knobs(spec.lead_time, spec.headroom, spec.hold_time, base, spec.service_level)
    grid = [own, *(k if isinstance(k, Knobs)
                   else Knobs(k[0], k[1], spec.hold_time, base, spec.service_level)
                   for k in sweep)]  # fmt: skip
    oracle_knobs = Knobs(startup, 0.0, timedelta(0), base)
    max_lead = max(pd.Timedelta(g.lead) for g in [*grid, oracle_knobs])
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
    if setup.adjust is not None:
        rolling = setup.adjust(rolling, history)
    say("planning floors")
    # The operator's planning grid (plans.plan_policy, docs/policy.md "Planning
    # resolution"), so a back-test replays the floors the operator would set.
    n_h = rolling.point.shape[1]
    want = setup.plan_step if setup.plan_step is not None else planning.plan_resolution(fstep, n_h)
    pstep = plan_step_for(fstep, want)
    if setup.plan_step is not None and pstep != setup.plan_step:
        raise InputError(
            f"--plan-step {format_duration(pd.Timedelta(setup.plan_step).to_pytimedelta())} "
            f"must divide the forecast step {format_duration(fstep.to_pytimedelta())}"
        )
    kw = {"per_replica": setup.per_replica, "base_target": base}
    fc = floors(spec, rolling, grid, bounds, plan_step=pstep, **kw)
    orc = bt.oracle_forecasts(history, times, horizon=horizon)
    o_want = setup.plan_step or planning.plan_resolution(orc.step, orc.point.shape[1])
    o_step = plan_step_for(orc.step, o_want)
    of = floors(spec, orc, [oracle_knobs], bounds, plan_step=o_step, oracle=True, **kw)
    demand = bt.sim_demand(history, start, end, sync)
    n = len(demand)
    fc_rows = bt.assemble_floors(start, sync, n, times, pstep, fc)
    or_rows = bt.assemble_floors(start, sync, n, times, o_step, of)
    # The common manual fix: one static minReplicas sized for the window's peak with
    # the policy's headroom. It knows the peak in advance (an oracle), so it is the
    # best a static floor can do for capacity, and shows what that costs.
    peak = float(demand.max())
    static = int(
        planning.required_replicas(np.array([[peak]]), setup.per_replica, spec.headroom)[0, 0]
    )
    static = int(np.clip(static, bounds.lower, bounds.ceiling))
    rungs = frontier.ladder(base, top=max(g.target for g in grid), targets=setup.ladder)
    extra = [t for t in rungs if t != round(base, 6)]
    flat = np.full((1 + len(extra), n), bounds.baseline)
    mins = np.vstack([flat[:1], np.full((1, n), static), fc_rows[:1], or_rows, fc_rows[1:],
                      flat[1:]])  # fmt: skip
    names = ("reactive", "static_peak", "floorcast", "oracle",
             *[f"sweep{i}" for i in range(len(grid) - 1)],
             *[f"hpa@{t:g}" for t in extra])  # fmt: skip
    targets = np.array([base, base, base, base, *[g.target for g in grid[1:]], *extra])
    say(f"simulating {len(names)} scenarios over {n} HPA syncs")
    hpa = hpa_model.HpaConfig(
        max_replicas=max(setup.hpa_max, setup.baseline),
        target_utilization=base,
        scale_up=setup.scale_up,
        scale_down=setup.scale_down,
    )
    delay = planning.window_steps(pd.Timedelta(startup), sync)
    # core.frontier: a row at target u' is the base row's demand scaled by u / u'.
    dem = demand[None, :] * frontier.demand_scale(base, targets)[:, None]
    k = len(names) - len(extra)
    trace = hpa_model.simulate(
        dem[:k], mins[:k], per_replica=setup.per_replica, hpa=hpa, ready_delay_steps=delay
    )
    live = None
    if spec.live_correction.enabled:
        # The floorcast rows again, with the operator's live correction (replay_live):
        # it observes what the uncorrected replay's HPA reported up to each instant.
        rows = [2, *range(4, 4 + len(grid) - 1)]
        fixed, live = replay_live.correct(
            spec, rolling, grid, bounds, planned=mins[rows], demand=demand,
            scaled=trace.scaled[rows], sim_start=start, sync=sync, plan_step=pstep,
            per_replica=setup.per_replica, base_target=base, interval=setup.interval,
            keep_rule=setup.correction_keep or correction.KEEP,
        )  # fmt: skip
        mins[rows] = fixed
        again = hpa_model.simulate(dem[rows], fixed, per_replica=setup.per_replica, hpa=hpa,
                                   ready_delay_steps=delay)  # fmt: skip
        for name in ("replicas", "ready", "scaled"):
            getattr(trace, name)[rows] = getattr(again, name)
    guarded = None
    if any(replay_guard.guarded(spec, g) for g in grid):
        guarded = _guard(spec, rolling, grid, bounds, mins, trace, dem, targets, hpa, live,
                         demand=demand, start=start, sync=sync, pstep=pstep, setup=setup,
                         delay=delay)  # fmt: skip
    if extra:
        # Whoever lowers the target raises maxReplicas with it, or the cap, not the
        # target, would decide the rung: the rungs share the cap scaled for the lowest.
        cap = int(np.ceil(hpa.max_replicas * base / min(extra) - 1e-9))
        more = hpa_model.simulate(dem[k:], mins[k:], per_replica=setup.per_replica,
                                  hpa=replace(hpa, max_replicas=max(cap, hpa.max_replicas)),
                                  ready_delay_steps=delay)  # fmt: skip
        trace = hpa_model.Trace(
            replicas=np.vstack([trace.replicas, more.replicas]),
            ready=np.vstack([trace.ready, more.ready]),
            scaled=np.vstack([trace.scaled, more.scaled]),
        )
    scores = bt.metrics(trace, dem, per_replica=setup.per_replica, target=targets, sync=sync)
    err = bt.forecast_error(rolling, history, end)
    lad = _ladder(rungs, base, names, scores)
    tuned = {
        name: _tuned(scores[names.index(name)], lad)
        for name in ("floorcast", "oracle", *[f"sweep{i}" for i in range(len(grid) - 1)])
    }
    table = [
        {"leadTime": pd.Timedelta(k.lead), "headroom": float(k.headroom),
         "holdTime": pd.Timedelta(k.hold), "target_utilization": float(k.target),
         "serviceLevel": k.service_level, **_guard_row(spec, k, guarded, i + 1, sync),
         **scores[4 + i], **_saving(tuned[f"sweep{i}"])}
        for i, k in enumerate(grid[1:])
    ]  # fmt: skip
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
        target=base,
        targets=targets,
        ladder=lad,
        tuned=tuned,
        plan_step=pstep,
        live_factor=live,
        guard=guarded,
    )


def _guard(spec: PolicySpec, rolling: bt.Rolling, grid: list[Knobs], bounds: plans.Bounds,
           mins: np.ndarray, trace: hpa_model.Trace, dem: np.ndarray, targets: np.ndarray,
           hpa: hpa_model.HpaConfig, live: np.ndarray | None, *, demand: np.ndarray,
           start: pd.Timestamp, sync: pd.Timedelta, pstep: pd.Timedelta, setup: Setup,
           delay: int) -> replay_guard.Replayed:  # fmt: skip
    """The floorcast rows that replay the accuracy guard, replayed again with it
    (``replay_guard``): it observes what the replay without it reported up to each
    instant; ``mins`` and ``trace`` are updated in place, the scores without the
    guard kept in ``Replayed.without``."""
    rows = [2, *range(4, 4 + len(grid) - 1)]
    rep = replay_guard.replay(
        spec, rolling, grid, bounds, current=mins[rows], demand=demand,
        scaled=trace.scaled[rows], sim_start=start, sync=sync, plan_step=pstep,
        per_replica=setup.per_replica, base_target=setup.target_utilization,
        interval=setup.interval, factor=live,
    )  # fmt: skip
    at = [rows[g] for g in rep.rows]
    before = hpa_model.Trace(replicas=trace.replicas[at], ready=trace.ready[at],
                             scaled=trace.scaled[at])  # fmt: skip
    without = bt.metrics(before, dem[at], per_replica=setup.per_replica, target=targets[at],
                         sync=sync)  # fmt: skip
    mins[at] = rep.floors
    again = hpa_model.simulate(dem[at], rep.floors, per_replica=setup.per_replica, hpa=hpa,
                               ready_delay_steps=delay)  # fmt: skip
    for name in ("replicas", "ready", "scaled"):
        getattr(trace, name)[at] = getattr(again, name)
    return replace(rep, without=without)


def _guard_row(spec: PolicySpec, k: Knobs, rep: replay_guard.Replayed | None, g: int,
               sync: pd.Timedelta) -> dict[str, Any]:  # fmt: skip
    """A sweep row's guard keys: its thresholds and figures, null without the guard."""
    if rep is None or g not in rep.rows:
        return {"maxError": None, "maxExceedance": None, "accuracy_guard": None}
    err, exc = replay_guard.thresholds(spec, k)
    return {"maxError": err, "maxExceedance": exc,
            "accuracy_guard": replay_guard.summary(rep, rep.rows.index(g), sync)}  # fmt: skip


def _check(setup: Setup) -> None:
    if setup.per_replica <= 0:
        raise InputError(f"per-replica capacity must be > 0, got {setup.per_replica}")
    if not 0 < setup.target_utilization <= 10:
        raise InputError(
            f"target utilization must be in (0, 1000] %, got {setup.target_utilization:.0%}"
        )
    if setup.plan_step is not None and setup.plan_step <= pd.Timedelta(0):
        raise InputError("--plan-step must be > 0")


def _ladder(
    rungs: list[float], base: float, names: tuple[str, ...], scores: list[dict[str, Any]]
) -> list[dict[str, Any]]:
    """The HPA alone at each rung, highest target first; the base rung is ``reactive``."""
    out = []
    for t in rungs:
        name = "reactive" if t == round(base, 6) else f"hpa@{t:g}"
        out.append({"target_utilization": t, **scores[names.index(name)]})
    return out


def _tuned(score: dict[str, Any], lad: list[dict[str, Any]]) -> dict[str, Any]:
    """The HPA alone tuned to saturate as little as this row, and the row's saving."""
    point = frontier.equal_saturation(
        [x["target_utilization"] for x in lad],
        [x["under_capacity_minutes"] for x in lad],
        [x["replica_hours"] for x in lad],
        score["under_capacity_minutes"],
    )
    return {"hpa": point, "saving": frontier.saving(score["replica_hours"], point)}


def _saving(t: dict[str, Any]) -> dict[str, Any]:
    return {
        "saving_at_equal_saturation": t["saving"],
        "equal_saturation_target": t["hpa"]["target_utilization"],
        "equal_saturation_found": t["hpa"]["found"],
    }
