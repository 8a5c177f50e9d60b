"""Prometheus metrics, the operator's public operational surface (names are stable)."""

from __future__ import annotations

import contextlib

from prometheus_client import Counter, Gauge, Histogram, start_http_server

from floorcast.controller.state import Decision

_L = ("namespace", "policy")
FLOOR = Gauge("floorcast_floor_replicas", "Floor in force (or proposed, in dry run)", _L)
BASELINE = Gauge("floorcast_baseline_replicas", "The owner's baseline minReplicas", _L)
FORECAST_AGE = Gauge("floorcast_forecast_age_seconds", "now - forecast generated", _L)
LIVE_FACTOR = Gauge("floorcast_live_correction_factor",
                    "Live correction factor in use (observed / forecast load)", _L)  # fmt: skip
FORECAST_ERROR = Gauge("floorcast_forecast_error_ratio",
                       "Accuracy guard: WAPE of the forecast over its window", _L)  # fmt: skip
ADDED_HOURS = Gauge("floorcast_floor_added_replica_hours",
                    "Replica-hours the floor added above the HPA alone, last 24 h", _L)  # fmt: skip
PATCHES = Counter("floorcast_hpa_patches_total", "HPA patches sent", _L)
ERRORS = Counter("floorcast_reconcile_errors_total", "Reconciles that failed", ("reason",))
DURATION = Histogram("floorcast_reconcile_duration_seconds", "Time of one reconcile",
                     buckets=(0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10))  # fmt: skip


def record(namespace: str, name: str, d: Decision) -> None:
    labels = (namespace, name)
    for gauge, value in ((FLOOR, d.floor), (BASELINE, d.baseline),
                         (FORECAST_AGE, d.forecast_age_seconds),
                         (LIVE_FACTOR, d.live_factor),
                         (FORECAST_ERROR, d.accuracy_error),
                         (ADDED_HOURS, d.added_replica_hours)):  # fmt: skip
        if value is None:
            with contextlib.suppress(KeyError):
                gauge.remove(*labels)
        else:
            gauge.labels(*labels).set(value)


def forget(namespace: str, name: str) -> None:
    """A deleted policy must not leave a stale series behind."""
    for gauge in (FLOOR, BASELINE, FORECAST_AGE, LIVE_FACTOR, FORECAST_ERROR, ADDED_HOURS):
        with contextlib.suppress(KeyError):
            gauge.remove(namespace, name)


def serve(port: int) -> None:
    start_http_server(port)


QUEUE_DEPTH = Gauge("floorcast_queue_depth", "Policies queued for a reconcile (due or not)")
RECONCILES = Counter("floorcast_reconciles_total", "Reconciles run by the workers")
LEADER = Gauge("floorcast_leader", "1 while this replica acts (holds the Lease), 0 on standby")
