"""The target HPA: read it as autoscaling/v2, and patch only what floorcast owns.

The patch is a JSON merge patch of ``spec.minReplicas`` and ``floorcast.dev/*``
annotations, never ``maxReplicas`` or metrics, carrying ``metadata.resourceVersion``
as a precondition: if someone edited the HPA since we read it, the API server answers
409 Conflict and the caller re-reads and decides again on fresh state.
"""

from __future__ import annotations

import pandas as pd
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from floorcast.controller.state import HpaPatch, HpaState

MERGE_PATCH = "application/merge-patch+json"
FIELD_MANAGER = "floorcast"


class Conflict(Exception):
    """The HPA changed under us (HTTP 409); re-read and re-decide."""


def read_hpa(api: k8s.ApiClient, namespace: str, name: str, *, timeout: float) -> HpaState:
    try:
        h = k8s.AutoscalingV2Api(api).read_namespaced_horizontal_pod_autoscaler(
            name, namespace, _request_timeout=timeout
        )
    except ApiException as e:
        if e.status == 404:
            return HpaState(exists=False)
        raise
    ref = h.spec.scale_target_ref
    util, util_error = _cpu_current(h)
    st = h.status
    last = st.last_scale_time if st is not None else None
    return HpaState(
        exists=True,
        min_replicas=h.spec.min_replicas if h.spec.min_replicas is not None else 1,
        max_replicas=h.spec.max_replicas,
        annotations=dict(h.metadata.annotations or {}),
        resource_version=h.metadata.resource_version,
        cpu_target_utilization=_cpu_target(h),
        scale_target=(ref.api_version or "", ref.kind, ref.name) if ref else None,
        cpu_current_utilization=util,
        cpu_current_error=util_error,
        current_replicas=st.current_replicas if st is not None else None,
        last_scale_time=pd.Timestamp(last).tz_convert("UTC") if last is not None else None,
    )


def _cpu_target(h: k8s.V2HorizontalPodAutoscaler) -> int | None:
    """The Resource metric on cpu with a Utilization target, if the HPA has one."""
    for m in h.spec.metrics or []:
        r = m.resource if m.type == "Resource" else None
        if r is not None and r.name == "cpu" and r.target.type == "Utilization":
            return r.target.average_utilization
    return None


def _cpu_current(h: k8s.V2HorizontalPodAutoscaler) -> tuple[int | None, str | None]:
    """status.currentMetrics' CPU Resource averageUtilization, for the live correction;
    several CPU series are an error (which one is the load?), none is no value."""
    found = [m.resource.current.average_utilization
             for m in (h.status.current_metrics or [] if h.status else [])
             if m.type == "Resource" and m.resource is not None and m.resource.name == "cpu"
             and m.resource.current is not None
             and m.resource.current.average_utilization is not None]  # fmt: skip
    if len(found) > 1:
        return None, (f"the HPA reports {len(found)} CPU utilization series in "
                      "status.currentMetrics; expected one")  # fmt: skip
    return (found[0] if found else None), None


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
