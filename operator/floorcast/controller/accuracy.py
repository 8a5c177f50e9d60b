"""The accuracy guard and the floor's cost at reconcile time (docs/policy.md,
"Accuracy guard" and "Cost of the floor").

Both read the same observation as the live correction (``live.reading``: the
HPA's status turned into load, or the policy's ``observedLoad.prometheusQuery``) and
feed the pure cores (``core.guard``, ``core.floor_cost``). No I/O and no clock: the
memory comes in with ``Observed.guard`` and goes out with ``Decision.guard_memory``;
the reconcile adapter keeps it per policy. After a restart the memory is gone; a guard
the status still shows tripped starts tripped (the safe side), and the cost starts
from zero.

Safety: a tripped guard only lowers the floor to the policy's lower bound (never
below the baseline); no data never trips it; a bug here leaves the floor as planned.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd

from floorcast import plans
from floorcast.controller.conditions import FORECAST_ACCURATE, Condition
from floorcast.controller.live import Outcome, reading
from floorcast.controller.state import Event, Observed
from floorcast.core import floor_cost, guard
from floorcast.durations import format_duration

ACCURATE, INACCURATE, UNJUDGED = "WithinLimits", "ForecastInaccurate", "NotJudged"
RECOVERED = "ForecastAccurateAgain"
#: Published figures move in steps of this, so noise does not rewrite the status.
PUBLISH_STEP = 0.05
#: The published cost moves in steps of this many replica-hours.
COST_STEP = 0.1


@dataclass(frozen=True)
class Memory:
    guard: guard.State
    cost: floor_cost.State
    window: float  # seconds; a changed window starts the guard afresh


@dataclass(frozen=True)
class Result:
    floor: int
    condition: Condition | None
    status: dict[str, Any] | None
    events: tuple[Event, ...]
    memory: Memory | None
    error: float | None
    added_hours: float | None


def sized_load(plan: plans.FloorPlan) -> float:
    """What the floor was sized for at ``plan.at``: the planning load × event factor
    × (1 + headroom), on the planning grid."""
    s = plan.schedule
    load = plans.refined_load(plan.spec, plan.forecast, s.step)
    i = min(s.index_at(plan.at), len(load) - 1)
    ev = plans.policy_event_factors(plan.spec, pd.DatetimeIndex([s.start + i * s.step]))
    return float(load[i] * ev[0] * (1.0 + plan.spec.headroom))


def _pub(prev: Any, key: str, value: float, step: float) -> float:
    old = prev.get(key) if isinstance(prev, Mapping) else None
    if isinstance(old, int | float) and abs(old - value) < step:
        return float(old)
    return round(value, 2)


def published_figure(prev: Any, key: str, value: float, limit: float) -> float:
    """A guard figure as ``status.accuracy`` shows it: moved in steps of
    ``PUBLISH_STEP`` and rounded to 0.01, but always on the same side of its threshold
    as the exact value, so the status never reads "WAPE 49 % (max 50 %)" beside a
    tripped guard (seen on the living cluster: e2e/test_living_guard.py)."""
    shown = _pub(prev, key, value, PUBLISH_STEP)
    if (shown > limit) == (value > limit):
        return shown
    shown = round(value, 2)
    if value > limit and shown <= limit:
        return math.ceil(value * 100) / 100
    if value <= limit < shown:
        return math.floor(value * 100) / 100
    return shown


def _was_tripped(status: Mapping[str, Any]) -> bool:
    for c in status.get("conditions") or []:
        if isinstance(c, Mapping) and c.get("type") == FORECAST_ACCURATE:
            return c.get("status") == "False"
    return False


def apply(obs: Observed, plan: plans.FloorPlan, corrected: Outcome) -> Result:
    try:
        return _apply(obs, plan, corrected)
    except Exception as e:  # a bug must not cost the plan
        msg = f"the accuracy guard failed ({type(e).__name__}); the floor stands as planned"
        cond = (Condition(FORECAST_ACCURATE, None, UNJUDGED, msg)
                if plan.spec.accuracy_guard.enabled else None)  # fmt: skip
        return Result(corrected.floor, cond, None, (), obs.guard, None, None)


def _apply(obs: Observed, plan: plans.FloorPlan, corrected: Outcome) -> Result:
    g = plan.spec.accuracy_guard
    now = obs.now.value / 1e9
    window = pd.Timedelta(g.window).total_seconds()
    mem = obs.guard if isinstance(obs.guard, Memory) else None
    if mem is None or mem.window != window:
        gs = guard.State.empty(1, window)
        if _was_tripped(obs.status or {}):  # restart: keep the safe side
            gs = replace(gs, tripped=np.array([True]), tripped_at=np.array([now]))
        mem = Memory(gs, mem.cost if mem else floor_cost.State.empty(1), window)
    sample, why = reading(obs, plan)  # the HPA's status, or observedLoad's query
    settings = guard.Settings(window=window, max_error=g.max_error,
                              max_exceedance=g.max_exceedance,
                              recover_after=pd.Timedelta(g.recover_after).total_seconds(),
                              min_level=plan.per_replica)  # fmt: skip
    was = bool(mem.guard.tripped[0])
    gs, r = guard.update(mem.guard, np.array([sample]), np.array([plans.point_at(plan)]),
                         np.array([sized_load(plan)]), now, settings)  # fmt: skip
    tripped = bool(gs.tripped[0]) and g.enabled
    floor = corrected.floor
    if tripped:
        live_ok = g.action == "LiveCorrected" and corrected.factor is not None
        floor = corrected.floor if live_ok else plan.bounds.lower
    # The cost: what the floor in force adds above the HPA alone (core.floor_cost).
    h = obs.hpa
    alone = floor_cost.hpa_alone(
        np.array([h.current_replicas if h.current_replicas else np.nan]),
        np.array([h.cpu_current_utilization if h.cpu_current_utilization is not None
                  and not h.cpu_current_error else np.nan]),
        np.array([h.cpu_target_utilization or np.nan]),
        baseline=np.array([plan.bounds.baseline]), maximum=np.array([plan.bounds.hpa_max]),
    )  # fmt: skip
    cs = floor_cost.update(mem.cost, floor_cost.added(np.array([floor]), alone), now)
    hours = float(floor_cost.replica_hours(cs, now)[0])
    memory = Memory(gs, cs, window)
    prev = obs.status or {}
    if not g.enabled:
        return Result(floor, None, None, (), memory, None, hours)
    err, exc = float(r.error[0]), float(r.exceedance[0])
    pa = prev.get("accuracy")
    status: dict[str, Any] = {}
    figures = ""
    if r.verdict[0] != guard.UNJUDGED:
        status = {"error": published_figure(pa, "error", err, g.max_error),
                  "exceedance": published_figure(pa, "exceedance", exc,
                                                 g.max_exceedance)}  # fmt: skip
        figures = (f"WAPE {status['error']:.0%} (max {g.max_error:.0%}), load above the "
                   f"sized floor {status['exceedance']:.0%} of the time (max "
                   f"{g.max_exceedance:.0%}) over {_dur(g.window)}")  # fmt: skip
    fall = (f"floors from the live-corrected forecast only (floor {floor})"
            if g.action == "LiveCorrected" and floor == corrected.floor
            and corrected.factor is not None
            else f"floor at the policy's lower bound {plan.bounds.lower}")  # fmt: skip
    events: list[Event] = []
    if tripped:
        reason = INACCURATE
        msg = f"{figures or 'the forecast was judged wrong'}; {fall}"
        if r.verdict[0] == guard.UNJUDGED:
            msg += f"; not judged now ({why or 'too little evidence in the window'})"
        cond = Condition(FORECAST_ACCURATE, False, reason, msg)
        if not was:
            events.append(Event("Warning", INACCURATE, msg))
    elif r.verdict[0] == guard.UNJUDGED:
        reason = UNJUDGED
        seen = float(r.observed[0])
        msg = why or (f"not judged yet: {seen:.0%} of the {_dur(g.window)} window observed "
                      f"(needs {guard.MIN_EVIDENCE:.0%}) or mean load below one replica's")
        msg += "; floors follow the forecast"
        cond = Condition(FORECAST_ACCURATE, None, reason, msg)
    else:
        reason = ACCURATE
        msg = figures
        cond = Condition(FORECAST_ACCURATE, True, reason, msg)
        if was:
            events.append(Event("Normal", RECOVERED, f"{figures}; floors follow the forecast "
                                                     "again"))  # fmt: skip
    status.update({"reason": reason, "message": msg})
    return Result(floor, cond, status, tuple(events), memory,
                  err if np.isfinite(err) else None, hours)  # fmt: skip


def published_cost(prev: Mapping[str, Any], hours: float) -> float:
    return _pub(prev, "addedReplicaHours", hours, COST_STEP)


def _dur(td: Any) -> str:
    return format_duration(pd.Timedelta(td).to_pytimedelta())
