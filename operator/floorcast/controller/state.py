"""What the reconcile decision reads and returns: plain data, shared by decide and adapters.

Kept apart from ``decide`` so the adapters in ``kube/`` can build ``Observed`` and carry
out a ``Decision`` without importing the decision logic itself.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from floorcast.core.series import Series
from floorcast.policy import Policy

ANNOTATION_PREFIX = "floorcast.dev/"
ANN_BASELINE = ANNOTATION_PREFIX + "baseline"
ANN_FLOOR = ANNOTATION_PREFIX + "applied-floor"
ANN_POLICY = ANNOTATION_PREFIX + "policy"
OUR_ANNOTATIONS = (ANN_BASELINE, ANN_FLOOR, ANN_POLICY)
#: The status keys this operator owns; anything else under status is left alone.
STATUS_KEYS = (
    "observedGeneration",
    "floor",
    "baseline",
    "proposedFloor",
    "nextChange",
    "forecastGenerated",
    "lastAppliedTime",
    "liveCorrection",
    "accuracy",
    "addedReplicaHours",
    "leadTime",
    "explanation",
    "conditions",
)

# Condition reasons (CamelCase, per the API conventions).
FORECAST_MISSING, FORECAST_INVALID, FORECAST_STALE = (
    "ForecastMissing",
    "ForecastInvalid",
    "ForecastStale",
)
URL_NOT_ALLOWED, TARGET_NOT_FOUND, TARGET_CONFLICT = (
    "UrlNotAllowed",
    "TargetNotFound",
    "TargetConflict",
)
DRY_RUN, POLICY_INVALID, CAPACITY_UNKNOWN = "DryRun", "PolicyInvalid", "CapacityUnknown"
FLOOR_APPLIED, BASELINE_RESTORED, FORECAST_OK = "FloorApplied", "BaselineRestored", "ForecastLoaded"
#: A bug or an API failure while handling one policy (controller/failsafe.py), and the
#: baseline read back from ``status.baseline`` after our annotations vanished.
RECONCILE_FAILED, BASELINE_RECOVERED = "ReconcileFailed", "BaselineRecovered"


@dataclass(frozen=True)
class HpaState:
    """The target HPA as read; ``min_replicas`` is the API default (1) when unset."""

    exists: bool
    min_replicas: int = 1
    max_replicas: int = 1
    annotations: Mapping[str, str] = field(default_factory=dict)
    resource_version: str | None = None
    #: For capacity.fromHPA: the CPU metric's averageUtilization target (percent), and
    #: the scaleTargetRef as (apiVersion, kind, name).
    cpu_target_utilization: int | None = None
    scale_target: tuple[str, str, str] | None = None
    #: From the HPA's status, for the live correction: the CPU metric's current
    #: averageUtilization (percent), or why it cannot be read (several CPU series);
    #: status.currentReplicas and status.lastScaleTime.
    cpu_current_utilization: int | None = None
    cpu_current_error: str | None = None
    current_replicas: int | None = None
    last_scale_time: pd.Timestamp | None = None


@dataclass(frozen=True)
class LiveMemory:
    """The live correction's EWMA between reconciles (``core.correction.State`` of one
    workload) and when it was last updated."""

    observed: float
    forecast: float
    weight: float
    at: pd.Timestamp


@dataclass(frozen=True)
class ForecastState:
    """Either a parsed forecast or why there is none (a condition reason + message)."""

    series: Series | None = None
    reason: str | None = None
    message: str = ""
    #: Something the policy's owner should know even though the forecast is usable.
    note: str = ""


@dataclass(frozen=True)
class Observed:
    name: str
    namespace: str
    policy: Policy | None
    hpa: HpaState
    forecast: ForecastState
    now: pd.Timestamp
    status: Mapping[str, Any] = field(default_factory=dict)
    generation: int | None = None
    policy_error: str | None = None
    operator_dry_run: bool = False
    conflict_with: str | None = None
    deleting: bool = False
    per_replica: float | None = None
    per_replica_error: str | None = None
    live: LiveMemory | None = None
    #: The accuracy guard's and the cost's memory (controller/accuracy.py).
    guard: Any = None
    #: ``leadTime: auto``: the measured lead's report (controller/leadtime.py ``Lead``);
    #: the policy above already plans with its lead.
    lead: Any = None
    #: ``observedLoad.prometheusQuery``'s answer (controller/query_load.py): the load, or
    #: None and why; None when the policy has no query (the HPA's status is read).
    query_load: tuple[float | None, str | None] | None = None


@dataclass(frozen=True)
class HpaPatch:
    """A JSON merge patch of ``spec.minReplicas`` and our annotations only.

    ``resourceVersion`` in a merge patch is a precondition: the API server answers 409
    if the HPA changed since it was read, and the caller re-reads and re-decides.
    """

    min_replicas: int
    annotations: Mapping[str, str | None]
    resource_version: str | None

    def body(self) -> dict[str, Any]:
        meta: dict[str, Any] = {"annotations": dict(self.annotations)}
        if self.resource_version is not None:
            meta["resourceVersion"] = self.resource_version
        return {"metadata": meta, "spec": {"minReplicas": self.min_replicas}}


@dataclass(frozen=True)
class Event:
    type: str  # "Normal" or "Warning"
    reason: str
    message: str


@dataclass(frozen=True)
class Decision:
    hpa_patch: HpaPatch | None
    status: dict[str, Any] | None  # the full desired status; None: leave it (deleting)
    status_changed: bool
    events: tuple[Event, ...]
    log: str
    floor: int | None = None
    baseline: int | None = None
    forecast_age_seconds: float | None = None
    #: The live correction's factor in use (None: not correcting) and its memory.
    live_factor: float | None = None
    live_memory: LiveMemory | None = None
    #: The accuracy guard's WAPE (None: not judged), the floor's added replica-hours
    #: over the last day, and the memory behind both (controller/accuracy.py).
    accuracy_error: float | None = None
    added_replica_hours: float | None = None
    guard_memory: Any = None
