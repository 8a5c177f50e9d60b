"""Glue between a parsed policy, a forecast and the HPA's bounds, and the pure planner.

The CLI's ``plan``, the operator's reconcile and the backtest all need the same
translation (which band to plan on, which events apply, what the lower bound and
ceiling are); keeping it in one place means a preview and the operator can never
disagree about what a policy implies.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd

from floorcast.core import planning, quantiles
from floorcast.core.series import Series
from floorcast.errors import InputError
from floorcast.policy import PolicySpec
from floorcast.timefmt import iso


@dataclass(frozen=True)
class Bounds:
    """What clamps the floor: the owner's baseline and the HPA's/policy's maximum."""

    lower: int
    ceiling: int
    baseline: int
    hpa_max: int


def bounds_for(spec: PolicySpec, *, baseline: int, hpa_max: int) -> Bounds:
    """lower = max(baseline, policy min); ceiling = min(policy max, HPA max).

    The baseline wins if the ceiling would be below it: floorcast never lowers what
    the owner set (docs/policy.md), and never raises anything above the HPA's maximum
    except in that one case where the owner's own minimum already is.
    """
    if baseline < 1:
        raise InputError(f"baseline must be >= 1, got {baseline}")
    if hpa_max < 1:
        raise InputError(f"HPA maxReplicas must be >= 1, got {hpa_max}")
    # A policy minimum above the HPA's maximum would make an invalid HPA (min > max).
    lower = max(baseline, min(spec.min_replicas or 0, hpa_max))
    ceiling = min(spec.max_replicas or hpa_max, hpa_max)
    return Bounds(lower=lower, ceiling=max(ceiling, baseline), baseline=baseline, hpa_max=hpa_max)


def _sized_on(spec: PolicySpec, forecast: Series) -> tuple[np.ndarray, str]:
    """(the line the floor is sized on, its short label); docs/policy.md, "serviceLevel".

    Without ``serviceLevel`` (the default) it is today's rule: the upper band when the
    policy asks and the forecast has one, else the value. With it, the forecast's
    quantile at that level, interpolated between the levels it carries and clamped to
    the nearest outside them; a forecast without quantiles falls back to today's rule
    and the label says so.
    """
    if spec.service_level is not None and forecast.quantiles is not None:
        line, got = quantiles.quantile_at(forecast.levels, forecast.quantiles, spec.service_level)
        label = f"q{quantiles.level_name(got.level)}"
        if got.clamped:
            label += f" (serviceLevel {quantiles.level_name(got.asked)} is outside the "
            label += "forecast's quantiles, clamped)"
        return line, label
    if spec.use_upper_bound and forecast.upper is not None:
        line, label = np.asarray(forecast.upper, dtype=np.float64), "upper band"
    else:
        line, label = np.asarray(forecast.values, dtype=np.float64), "value"
    if spec.service_level is not None:
        label += f" (serviceLevel {quantiles.level_name(spec.service_level)}: the forecast "
        label += "has no quantiles)"
    return line, label


def planning_load(spec: PolicySpec, forecast: Series) -> np.ndarray:
    """The forecast the floor is sized on (``planning_label`` names it)."""
    return _sized_on(spec, forecast)[0]


def planning_label(spec: PolicySpec, forecast: Series) -> str:
    """A short human label of what the floor is sized on: ``q0.95``, ``upper band`` or
    ``value``, with the reason when a service level was clamped or could not be used."""
    return _sized_on(spec, forecast)[1]


def service_level_fallback(spec: PolicySpec, forecast: Series) -> str | None:
    """The sentence an operator sees in the ForecastAvailable condition when the policy
    asks for a ``serviceLevel`` and the forecast carries no quantiles, so the floor is
    sized on the band rule instead (docs/policy.md, "serviceLevel"); None otherwise."""
    if spec.service_level is None or forecast.quantiles is not None:
        return None
    used = "upper band" if spec.use_upper_bound and forecast.upper is not None else "value"
    return (f"serviceLevel {quantiles.level_name(spec.service_level)} asked but the forecast "
            f"has no quantiles; sized on {used}")  # fmt: skip


def refined_load(spec: PolicySpec, forecast: Series, fine: pd.Timedelta) -> np.ndarray:
    """The planning load read on ``fine`` (``planning.refine``), from the forecast's
    first point to its last: the same reading the back-test plans on
    (docs/backtest.md, "Planning resolution"), so a rise between two forecast points
    is covered a lead before it happens, not from the next whole step. Each point
    stands for the interval it starts (``planning.cover_intervals``)."""
    n = planning.refined_points(len(forecast), forecast.step, fine)
    line = planning.refine(planning_load(spec, forecast)[None, :], forecast.step, fine)[:, :n]
    return planning.cover_intervals(line)[0]


def policy_event_factors(spec: PolicySpec, times: pd.DatetimeIndex) -> np.ndarray:
    events = [(e.start, e.end, e.factor) for e in spec.planned_events]
    return planning.event_factors(times, [events])[0]


@dataclass(frozen=True)
class Change:
    """One floor change, with what caused it (for rises) so Events can say why."""

    at: pd.Timestamp
    old: int
    new: int
    cause_at: pd.Timestamp | None
    cause_load: float | None

    def to_json(self) -> dict[str, Any]:
        out: dict[str, Any] = {"at": iso(self.at), "from": self.old, "to": self.new}
        if self.cause_at is not None:
            out["cause_at"] = iso(self.cause_at)
            out["cause_load"] = self.cause_load
        return out


@dataclass(frozen=True)
class FloorPlan:
    """One policy's plan: the floor at ``at``, and every change after it."""

    spec: PolicySpec
    forecast: Series
    schedule: planning.Schedule
    bounds: Bounds
    per_replica: float
    at: pd.Timestamp
    floor_now: int
    changes: list[Change]

    @property
    def next_change(self) -> Change | None:
        return self.changes[0] if self.changes else None

    @property
    def peak_required(self) -> int:
        return int(self.schedule.required[0].max())

    def to_json(self) -> dict[str, Any]:
        nxt = self.next_change
        return {
            "at": iso(self.at),
            "floor_now": self.floor_now,
            "next_change": nxt.to_json() if nxt else None,
            "changes": [c.to_json() for c in self.changes],
            "baseline": self.bounds.baseline,
            "lower": self.bounds.lower,
            "ceiling": self.bounds.ceiling,
            "per_replica": self.per_replica,
            "plan_step_seconds": self.schedule.step.total_seconds(),
            "sized_on": planning_label(self.spec, self.forecast),
            "forecast": {
                "start": iso(self.forecast.start),
                "end": iso(self.forecast.end),
                "step_seconds": self.forecast.step.total_seconds(),
                "generated": iso(self.forecast.generated) if self.forecast.generated else None,
                "covered_until": iso(
                    self.schedule.start + (int(self.schedule.covered[0]) - 1) * self.schedule.step
                ),
            },
        }


def window_need(plan: FloorPlan, *, band: bool = True) -> float:
    """The largest un-rounded need in [at − holdTime, at + leadTime]: load × (1 +
    headroom) × event factor / perReplica on the planning grid, before the ceil.

    The live correction multiplies it (``core.correction.corrected_floor``);
    ``band=False`` reads the forecast's value instead of the band the policy plans on.
    """
    spec, s = plan.spec, plan.schedule
    use = spec if band else replace(spec, use_upper_bound=False, service_level=None)
    load = refined_load(use, plan.forecast, s.step)
    ev = policy_event_factors(spec, pd.date_range(s.start, periods=len(load), freq=s.step))
    i = s.index_at(plan.at)
    lo = max(0, i - planning.window_steps(pd.Timedelta(spec.hold_time), s.step))
    hi = i + planning.window_steps(pd.Timedelta(spec.lead_time), s.step) + 1
    need = load[lo:hi] * ev[lo:hi] * (1.0 + spec.headroom) / plan.per_replica
    return float(need.max())


def point_at(plan: FloorPlan) -> float:
    """The forecast's value at ``plan.at`` on the planning grid: what the live
    correction compares the observed load with (``planning.refine``, no band)."""
    s = plan.schedule
    fc = plan.forecast
    line = planning.refine(np.asarray(fc.values, dtype=np.float64)[None, :], fc.step, s.step)
    return float(line[0, min(s.index_at(plan.at), line.shape[1] - 1)])


def plan_policy(
    spec: PolicySpec,
    forecast: Series,
    *,
    baseline: int,
    hpa_max: int,
    at: pd.Timestamp,
    per_replica: float | None = None,
) -> FloorPlan:
    """Plan one policy on one forecast; raises InputError when it cannot be decided."""
    cap = per_replica if per_replica is not None else spec.capacity.per_replica
    if cap is None:
        raise InputError(
            "capacity.fromHPA needs the HPA's CPU target and the pods' CPU requests; "
            "pass --per-replica to preview without a cluster"
        )
    bounds = bounds_for(spec, baseline=baseline, hpa_max=hpa_max)
    fine = planning.plan_resolution(forecast.step, len(forecast))
    load = refined_load(spec, forecast, fine)
    times = pd.date_range(forecast.start, periods=load.shape[0], freq=fine)
    try:
        schedule = planning.plan(
            forecast.start,
            fine,
            load[None, :],
            per_replica=cap,
            headroom=spec.headroom,
            lead=pd.Timedelta(spec.lead_time),
            hold=pd.Timedelta(spec.hold_time),
            lower=bounds.lower,
            ceiling=bounds.ceiling,
            event_factor=policy_event_factors(spec, times)[None, :],
        )
        i = schedule.check_covers(at, [pd.Timedelta(spec.lead_time)])
    except planning.PlanningError as e:
        raise InputError(str(e), source=forecast.source) from None
    ch = schedule.changes.for_workload(0)
    changes = []
    for idx, old, new, cause in zip(ch.index, ch.old, ch.new, ch.cause_index, strict=True):
        if idx <= i or idx >= schedule.covered[0]:
            continue
        changes.append(
            Change(
                at=times[idx],
                old=int(old),
                new=int(new),
                cause_at=times[cause] if cause >= 0 else None,
                cause_load=float(load[cause]) if cause >= 0 else None,
            )
        )
    return FloorPlan(
        spec=spec,
        forecast=forecast,
        schedule=schedule,
        bounds=bounds,
        per_replica=float(cap),
        at=pd.Timestamp(at),
        floor_now=int(schedule.floor[0, i]),
        changes=changes,
    )
