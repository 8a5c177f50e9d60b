"""When a policy must be reconciled next if none of its inputs changes (docs/operations.md,
"When the operator reconciles").

A decision can only change by the passage of time at instants it already knows: the
plan's next floor change, the moment the forecast goes stale (``generated + maxAge``),
stops covering ``now + leadTime``, or stops being "from the future". Input changes —
the policy, its forecast ConfigMap, its HPA — wake the policy through watches. Besides
those, a policy that observes load (live correction) is woken every observation
interval, a forecast that cannot be watched (a URL, an unlabelled ConfigMap) is
re-read on its own refresh period, and every policy is resynced once per resync period
to repair anything a missed watch event left behind.

Resyncs happen in slots: each policy has a fixed phase within the period (a hash of
its key) and resyncs when the wall clock reaches it. So N policies resync at a steady
N / period a second from the first cycle on, even when all of them were reconciled
within the same minute at start-up; a jitter of the period around each policy's last
reconcile would instead replay that start-up burst, smeared, every cycle (10,000
policies started in 87 s would resync within about 3 minutes, ~50 a second).

No I/O and no clock: ``now`` comes from the observation.
"""

from __future__ import annotations

import zlib
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import pandas as pd

from floorcast.controller.checks import MAX_CLOCK_SKEW
from floorcast.controller.state import Decision, Observed

#: Wake this long after a planned change, so ``now`` (floored to the second) is past it.
MARGIN = pd.Timedelta(seconds=1)
#: A resync slot closer than this share of the period is skipped for the next one, so
#: a policy just reconciled for another reason is not resynced again at once.
MIN_RESYNC_SHARE = 0.5


@dataclass(frozen=True)
class Periods:
    """Seconds: the safety-net resync, the live observation period, and how often a
    forecast that no watch reports (URL, unlabelled ConfigMap) is read again."""

    resync: float = 600.0
    observe: float = 30.0
    unwatched: float = 30.0


def phase(key: tuple[str, str]) -> float:
    """The policy's resync slot as a share of the period, in [0, 1), stable per key."""
    return zlib.crc32(f"{key[0]}/{key[1]}".encode()) / 2**32


def resync_wait(period: float, key: tuple[str, str], now: pd.Timestamp) -> float:
    """Seconds from ``now`` to the policy's next resync slot at least half a period
    away: in [period / 2, 3 period / 2)."""
    wait = (phase(key) * period - now.timestamp()) % period
    return wait + period if wait < MIN_RESYNC_SHARE * period else wait


def _at(text: Any) -> pd.Timestamp | None:
    if not isinstance(text, str):
        return None
    try:
        t = pd.Timestamp(text)
    except ValueError:
        return None
    return t.tz_localize("UTC") if t.tzinfo is None else t.tz_convert("UTC")


def time_triggers(obs: Observed, status: Mapping[str, Any]) -> list[pd.Timestamp]:
    """The instants at which this decision could change with no input changing."""
    out: list[pd.Timestamp] = []
    nxt = status.get("nextChange")
    if isinstance(nxt, Mapping) and (t := _at(nxt.get("at"))) is not None:
        out.append(t)
    series, policy = obs.forecast.series, obs.policy
    if series is not None and policy is not None:
        spec = policy.spec
        if series.generated is not None:
            out.append(series.generated + spec.forecast.max_age)
            out.append(series.generated - MAX_CLOCK_SKEW)
        out.append(series.end - spec.lead_time)
    return [t for t in out if t > obs.now]


def next_wake(obs: Observed, d: Decision, periods: Periods) -> float:
    """Seconds from ``obs.now`` until this policy should be reconciled again."""
    key = (obs.namespace, obs.name)
    waits = [resync_wait(periods.resync, key, obs.now)]
    status = d.status if d.status is not None else obs.status or {}
    waits += [(t + MARGIN - obs.now).total_seconds() for t in time_triggers(obs, status)]
    policy = obs.policy
    if policy is not None and policy.spec.live_correction.enabled:
        waits.append(periods.observe)
    if obs.forecast.note or (policy is not None and policy.spec.forecast.url is not None):
        waits.append(periods.unwatched)
    return max(0.5, min(waits))
