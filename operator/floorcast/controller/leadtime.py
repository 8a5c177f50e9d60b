"""``leadTime: auto`` in the operator: measure, remember, and report the lead.

The measurement (``core.leadtime``) is a Pod list per policy, so it is repeated only
every ``REMEASURE_SECONDS`` (start-ups drift over days, not minutes) and between
measurements the last one is used. The policy's spec is then planned with the
measured lead, so everything downstream (the floor window, the wake-up before the
forecast's end, the live correction's skip after a scale) uses the same lead.

A failed or thin measurement never blocks the floor: the policy's fallback lead (the
default ``leadTime``, within ``leadTimeAuto``'s bounds) applies and the
``LeadTimeMeasured`` condition says why.
"""

from __future__ import annotations

import logging
import threading
from collections.abc import Callable
from dataclasses import dataclass, replace
from datetime import timedelta
from typing import Any

import numpy as np

from floorcast.controller.conditions import LEAD_TIME_MEASURED, Condition
from floorcast.core import leadtime
from floorcast.durations import format_duration
from floorcast.kube.pods import PodTimes
from floorcast.policy import Policy

log = logging.getLogger("floorcast.operator")
MEASURED, TOO_FEW_PODS, PODS_UNREADABLE = "Measured", "TooFewPods", "PodsUnreadable"
#: How often a policy's Pods are listed again (common practice, no source: start-up
#: times change with releases and node pools, which take longer than this).
REMEASURE_SECONDS = 300.0

#: (namespace, scale target) -> (PodTimes, None) or (None, why); raises on API errors.
PodReader = Callable[[str, tuple[str, str, str]], tuple[PodTimes | None, str | None]]


@dataclass(frozen=True)
class Lead:
    """The lead a policy plans with, and how it was found (for status and condition)."""

    measurement: leadtime.Measurement
    condition: Condition
    status: dict[str, Any]


@dataclass
class LeadMemory:
    """The last Pod list per policy (times, or why none) and when (monotonic seconds)
    it was taken. The raw times are kept, not the verdict, so an edit of
    ``leadTimeAuto`` takes effect at once without listing the Pods again."""

    entries: dict[tuple[str, str], tuple[float, PodTimes | None, str | None]]
    lock: threading.Lock

    def __init__(self) -> None:
        self.entries = {}
        self.lock = threading.Lock()

    def forget(self, key: tuple[str, str]) -> None:
        with self.lock:
            self.entries.pop(key, None)


def judge(policy: Policy, times: PodTimes | None, why: str | None) -> Lead:
    """Pure: the lead, condition and status from what the Pod list showed."""
    auto = policy.spec.lead_time_auto
    assert auto is not None
    samples = (leadtime.startups(np.array(times.created), np.array(times.ready))
               if times is not None else np.array([]))  # fmt: skip
    m = leadtime.measure(samples, margin=auto.margin, low=auto.low, high=auto.high,
                         fallback=policy.spec.lead_time)  # fmt: skip
    lead = format_duration(m.lead)
    status: dict[str, Any] = {"value": lead, "source": "Measured" if m.measured else "Default",
                              "samples": m.samples}  # fmt: skip
    if m.measured:
        assert m.startup is not None and times is not None
        startup = format_duration_seconds(m.startup)
        status["podStartup"] = startup
        msg = (f"p90 pod start-up {startup} over {m.samples} Pods of {times.revision} "
               f"+ margin {format_duration(auto.margin)} → lead {lead} "
               f"(bounds {format_duration(auto.low)}–{format_duration(auto.high)})")  # fmt: skip
        cond = Condition(LEAD_TIME_MEASURED, True, MEASURED, msg)
    elif why is not None:
        cond = Condition(LEAD_TIME_MEASURED, False, PODS_UNREADABLE,
                         f"{why}; planning with the fallback lead {lead}")  # fmt: skip
    else:
        where = f" of {times.revision}" if times is not None else ""
        cond = Condition(LEAD_TIME_MEASURED, False, TOO_FEW_PODS,
                         f"{m.samples} Ready Pods{where} measured, {leadtime.MIN_SAMPLES} needed; "
                         f"planning with the fallback lead {lead}")  # fmt: skip
    return Lead(m, cond, status)


def format_duration_seconds(seconds: float) -> str:
    return format_duration(timedelta(seconds=round(seconds)))


def resolve(memory: LeadMemory, key: tuple[str, str], policy: Policy,
            target: tuple[str, str, str] | None, read: PodReader, *,
            now: float) -> tuple[Policy, Lead | None]:  # fmt: skip
    """The policy with its lead measured (or the fallback), and the report of it.
    ``now`` is monotonic seconds, for the re-measure interval only."""
    if policy.spec.lead_time_auto is None:
        memory.forget(key)
        return policy, None
    with memory.lock:
        hit = memory.entries.get(key)
    if hit is not None and now - hit[0] < REMEASURE_SECONDS:
        _, times, why = hit
    else:
        times, why = None, None
        if target is None:
            why = "the HPA names no scale target"
        else:
            try:
                times, why = read(key[0], target)
            except Exception as e:  # the fallback lead is safe; say what failed
                log.warning("%s/%s: listing the target's Pods failed: %r", *key, e)
                why = f"the target's Pods could not be listed ({_kind(e)})"
        with memory.lock:
            memory.entries[key] = (now, times, why)
    lead = judge(policy, times, why)
    spec = replace(policy.spec, lead_time=lead.measurement.lead)
    return replace(policy, spec=spec), lead


def _kind(e: BaseException) -> str:
    status = getattr(e, "status", None)
    return f"HTTP {status}" if status else type(e).__name__
