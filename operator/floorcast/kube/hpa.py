"""The target HPA: read it as autoscaling/v2, and patch only what floorcast owns.

The patch is a JSON merge patch of ``spec.minReplicas`` and ``floorcast.dev/*``
annotations, never ``maxReplicas`` or metrics, carrying ``metadata.resourceVersion``
as a precondition: if someone edited the HPA since we read it, the API server answers
409 Conflict and the caller re-reads and decides again on fresh state.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

import pandas as pd
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from floorcast.controller.state import HpaPatch, HpaState

MERGE_PATCH = "application/merge-patch+json"
FIELD_MANAGER = "floorcast"


class Conflict(Exception):
    """The HPA changed under us (HTTP 409); re-read and re-decide."""


def read_hpa(api: k8s.ApiClient, namespace: str, name: str, *, timeout: float) -> HpaState:
    """A GET, for when the operator's HPA cache has not seen this HPA (or a 409 says
    the cached copy is behind)."""
    try:
        resp = k8s.AutoscalingV2Api(api).read_namespaced_horizontal_pod_autoscaler(
            name, namespace, _request_timeout=timeout, _preload_content=False
        )
    except ApiException as e:
        if e.status == 404:
            return HpaState(exists=False)
        raise
    return hpa_from_body(json.loads(resp.data))


def hpa_from_body(body: Mapping[str, Any]) -> HpaState:
    """An autoscaling/v2 HPA as the API serves it (a GET's JSON or a watch event's
    object), read into what the decision needs. Shapes the API server would never send
    (a kind of bad input all the same) read as "no value", not as an exception."""
    meta, spec, st = (_m(body.get(k)) for k in ("metadata", "spec", "status"))
    ref = _m(spec.get("scaleTargetRef"))
    util, util_error = _cpu_current(st)
    last = st.get("lastScaleTime")
    mn = spec.get("minReplicas")
    return HpaState(
        exists=True,
        min_replicas=mn if isinstance(mn, int) else 1,
        max_replicas=_int(spec.get("maxReplicas")) or 1,
        annotations={str(k): str(v) for k, v in _m(meta.get("annotations")).items()},
        resource_version=meta.get("resourceVersion"),
        cpu_target_utilization=_cpu_target(spec),
        scale_target=_scale_target(ref),
        cpu_current_utilization=util,
        cpu_current_error=util_error,
        current_replicas=_int(st.get("currentReplicas")),
        last_scale_time=_time(last),
    )


def _scale_target(ref: Mapping[str, Any]) -> tuple[str, str, str] | None:
    if not ref.get("name"):
        return None
    return str(ref.get("apiVersion") or ""), str(ref.get("kind")), str(ref.get("name"))


def _m(v: Any) -> Mapping[str, Any]:
    return v if isinstance(v, Mapping) else {}


def _int(v: Any) -> int | None:
    return v if isinstance(v, int) and not isinstance(v, bool) else None


def _time(v: Any) -> pd.Timestamp | None:
    if not isinstance(v, str):
        return None
    try:
        return pd.Timestamp(v).tz_convert("UTC")
    except (ValueError, TypeError):
        return None


def _cpu_target(spec: Mapping[str, Any]) -> int | None:
    """The Resource metric on cpu with a Utilization target, if the HPA has one."""
    for m in spec.get("metrics") or []:
        r = _m(_m(m).get("resource")) if _m(m).get("type") == "Resource" else {}
        target = _m(r.get("target"))
        if r.get("name") == "cpu" and target.get("type") == "Utilization":
            return _int(target.get("averageUtilization"))
    return None


def _cpu_current(st: Mapping[str, Any]) -> tuple[int | None, str | None]:
    """status.currentMetrics' CPU Resource averageUtilization, for the live correction;
    several CPU series are an error (which one is the load?), none is no value."""
    found = []
    for m in st.get("currentMetrics") or []:
        r = _m(_m(m).get("resource")) if _m(m).get("type") == "Resource" else {}
        util = _int(_m(r.get("current")).get("averageUtilization"))
        if r.get("name") == "cpu" and util is not None:
            found.append(util)
    if len(found) > 1:
        return None, (f"the HPA reports {len(found)} CPU utilization series in "
                      "status.currentMetrics; expected one")  # fmt: skip
    return (found[0] if found else None), None


def fingerprint(h: HpaState) -> tuple[Any, ...]:
    """What in an HPA is an input to the decision, as opposed to its status: a change
    here wakes the policies on it at once; a status change only feeds observations."""
    ours = tuple(sorted((k, v) for k, v in h.annotations.items() if k.startswith("floorcast.dev/")))
    return (h.exists, h.min_replicas, h.max_replicas, ours, h.cpu_target_utilization,
            h.scale_target)  # fmt: skip


def patch_hpa(
    api: k8s.ApiClient, namespace: str, name: str, patch: HpaPatch, *, timeout: float
) -> None:
    try:
        k8s.AutoscalingV2Api(api).patch_namespaced_horizontal_pod_autoscaler(
            name,
            namespace,
            patch.body(),
            field_manager=FIELD_MANAGER,
            _content_type=MERGE_PATCH,
            _request_timeout=timeout,
        )
    except ApiException as e:
        if e.status == 409:
            raise Conflict(f"HPA {namespace}/{name} changed since it was read") from None
        raise
