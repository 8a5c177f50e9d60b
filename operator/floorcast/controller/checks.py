"""What the reconcile decision checks about a forecast before planning on it, and the
words its Events use about the plan; split from ``decide`` to keep each file short.
No I/O and no clock."""

from __future__ import annotations

import logging
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from floorcast.controller.state import FORECAST_INVALID, FORECAST_MISSING, FORECAST_STALE, Observed
from floorcast.core import planning
from floorcast.durations import format_duration
from floorcast.explain import explain
from floorcast.plans import FloorPlan
from floorcast.policy import Policy
from floorcast.timefmt import iso

log = logging.getLogger("floorcast.operator")
#: ``status.explanation``'s maxLength in the CRD is 4096; the line is ~200 characters,
#: and a cut one never makes the status write fail.
EXPLANATION_MAX = 3000


def peak(plan: FloorPlan, now: pd.Timestamp) -> pd.Timestamp:
    """When the need behind the current floor peaks, for the Event text."""
    s, spec = plan.schedule, plan.spec
    i = s.index_at(now)
    lo = max(0, i - planning.window_steps(pd.Timedelta(spec.hold_time), s.step))
    hi = min(
        s.required.shape[1], i + planning.window_steps(pd.Timedelta(spec.lead_time), s.step) + 1
    )
    j = lo + int(np.argmax(s.required[0, lo:hi]))
    # A grid instant stands for the interval up to the next (planning.cover_intervals):
    # a need reached by a rising line first shows one instant early; the peak is the
    # next instant when that one needs as much.
    if j + 1 < hi and s.required[0, j + 1] == s.required[0, j]:
        j += 1
    return s.start + j * s.step


#: How far ahead of the operator's clock a forecast's ``generated`` may be: clocks
#: drift by seconds, not minutes (common practice, no source). A forecast "from the
#: future" would otherwise pass every ``maxAge`` check for as long as it claims.
MAX_CLOCK_SKEW = pd.Timedelta(minutes=5)


def forecast_problem(obs: Observed, policy: Policy) -> tuple[str, str] | None:
    f = obs.forecast
    if f.series is None:
        return (f.reason or FORECAST_MISSING, f.message or "no forecast")
    spec = policy.spec
    if f.series.generated is not None and f.series.generated > obs.now + MAX_CLOCK_SKEW:
        return (
            FORECAST_INVALID,
            f"forecast generated at {iso(f.series.generated)} is more than "
            f"{format_duration(MAX_CLOCK_SKEW)} in the future (now {iso(obs.now)}); "
            "check the producer's clock",
        )
    if f.series.generated is not None and obs.now - f.series.generated > spec.forecast.max_age:
        return (
            FORECAST_STALE,
            f"forecast generated at {iso(f.series.generated)} is older than "
            f"maxAge {format_duration(spec.forecast.max_age)}",
        )
    if f.series.end < obs.now + spec.lead_time:
        return (
            FORECAST_STALE,
            f"forecast ends at {iso(f.series.end)}, before now + leadTime "
            f"({format_duration(spec.lead_time)})",
        )
    return None


def explanation(plan: FloorPlan, corrected: Any, guarded: Any) -> str | None:
    """The one-line cause of the floor in force (``floorcast.explain``), with the live
    correction's factor when it acted and the accuracy guard's override when it
    tripped. None if it cannot be written: an explanation never costs a floor."""
    try:
        if corrected.factor is not None:
            why = explain(plan, corrected.floor, live=corrected.factor, keep=corrected.keep)
        else:
            why = explain(plan, plan.floor_now)
        text = why.text()[:EXPLANATION_MAX]
        if guarded.floor != corrected.floor:
            return (f"accuracy guard tripped: floor {guarded.floor} instead of "
                    f"{corrected.floor}, which the forecast gives: {text}")  # fmt: skip
        return text
    except Exception as e:
        log.warning("explaining floor %s failed: %r", getattr(guarded, "floor", "?"), e)
        return None


def recorded(prev: Mapping[str, Any], key: str, floor: int, text: str | None) -> str | None:
    """``status.explanation``: rewritten only when the floor (``key``: floor or
    proposedFloor) changes, so an instant-by-instant reading of the same floor does not
    rewrite the status every reconcile; it is the record of why the floor was set."""
    old = prev.get("explanation")
    if isinstance(old, str) and prev.get(key) == floor:
        return old
    return text
