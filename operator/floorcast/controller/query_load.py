"""``spec.observedLoad.prometheusQuery`` at reconcile time (docs/policy.md, "Observed
load from Prometheus"): the load the live correction and the accuracy guard read,
from an instant query instead of the HPA's status.

The adapter side of ``Observed.query_load``: evaluated at most once per policy per
``--observe-interval`` (a 409 retry, an HPA watch event or a forecast change inside
the period reuse the last answer, good or bad), so a busy policy does not turn into
a query storm and a dead Prometheus costs one timeout per period. Every failure is
``(None, message naming the field)``: the live correction then shows
``NoObservation`` and the guard ``NotJudged`` — the floor follows the plan, never
below it (controller/live.py).
"""

from __future__ import annotations

import logging
import re
import threading
from collections.abc import Callable
from dataclasses import dataclass, field

import pandas as pd

from floorcast.controller.settings import Settings
from floorcast.policy import Policy
from floorcast.policy_observe import QUERY_FIELD
from floorcast.sources.prometheus_http import PrometheusError
from floorcast.sources.prometheus_instant import fetch_instant

log = logging.getLogger("floorcast.operator")
Reading = tuple[float | None, str | None]
Fetch = Callable[..., float]
_ELAPSED = re.compile(r" in [0-9.]+s\)$")


@dataclass
class QueryMemory:
    """The last answer per policy: (query, monotonic seconds when asked, reading)."""

    last: dict[tuple[str, str], tuple[str, float, Reading]] = field(default_factory=dict)
    _lock: threading.Lock = field(default_factory=threading.Lock)

    def forget(self, key: tuple[str, str]) -> None:
        with self._lock:
            self.last.pop(key, None)


def wanted(policy: Policy | None) -> str | None:
    """The query to evaluate, when the policy has one and something reads the load."""
    if policy is None:
        return None
    spec = policy.spec
    if not (spec.live_correction.enabled or spec.accuracy_guard.enabled):
        return None
    return spec.observed_load.prometheus_query


def query_load(settings: Settings, memory: QueryMemory, key: tuple[str, str],
               policy: Policy | None, *, now: pd.Timestamp, clock: float,
               fetch: Fetch = fetch_instant) -> Reading | None:  # fmt: skip
    """The policy's query load, or None when it has no query (the HPA's status is read)."""
    query = wanted(policy)
    if query is None:
        return None
    with memory._lock:
        hit = memory.last.get(key)
    if hit is not None and hit[0] == query and clock - hit[1] < settings.observe_interval_seconds:
        return hit[2]
    reading = _evaluate(settings, query, now, fetch, key)
    with memory._lock:
        memory.last[key] = (query, clock, reading)
    return reading


def _evaluate(settings: Settings, query: str, now: pd.Timestamp, fetch: Fetch,
              key: tuple[str, str]) -> Reading:  # fmt: skip
    if not settings.prometheus_url:
        return None, (f"{QUERY_FIELD} is set but the operator has no --prometheus-url "
                      "(chart value prometheusUrl); the plan stands")  # fmt: skip
    try:
        return fetch(settings.prometheus_url, query, at=now,
                     timeout=settings.api_timeout_seconds), None  # fmt: skip
    except PrometheusError as e:
        log.warning("%s/%s: %s: %s", key[0], key[1], QUERY_FIELD, e)
        # Without the seconds the retries took, so an unchanged failure renders an
        # unchanged status (controller/conditions.py: reconcile stays idempotent).
        return None, f"{QUERY_FIELD}: {_ELAPSED.sub(')', e.problem)}"
    except Exception as e:  # a bug here must not cost the plan
        log.warning("%s/%s: %s failed: %r", key[0], key[1], QUERY_FIELD, e)
        return None, f"{QUERY_FIELD} could not be evaluated ({type(e).__name__})"
