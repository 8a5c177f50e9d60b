"""The start-up times of a scale target's current Pods, read-only, for ``leadTime: auto``.

"Current" is the revision new Pods are created from, because that is the start-up the
next scale-up will see: for a Deployment the ReplicaSet whose
``deployment.kubernetes.io/revision`` annotation equals the Deployment's, for a
StatefulSet the Pods labelled ``controller-revision-hash`` = ``status.updateRevision``
(Kubernetes docs, "Deployments" > "Updating a Deployment" and "StatefulSets" >
"Rolling Updates"). Pods are matched by the owner's selector and then by their
owner reference, so a Pod that merely shares labels is not measured.

Left out, because their Ready time is not a start-up: Pods being deleted, Pods whose
containers restarted (the Ready condition's ``lastTransitionTime`` then records the
restart), and Pods not Ready yet. Lists are read raw (``_preload_content=False``):
building client models for hundreds of Pods is most of the cost otherwise.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import pandas as pd
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from floorcast.controller.capacity import SUPPORTED_KINDS

REVISION_ANNOTATION = "deployment.kubernetes.io/revision"


@dataclass(frozen=True)
class PodTimes:
    """Creation and Ready instants (epoch seconds; NaN = not Ready yet) of the current
    revision's measurable Pods, and the revision's name for the status message."""

    created: list[float]
    ready: list[float]
    revision: str


def selector_string(selector: Mapping[str, Any]) -> str:
    """A LabelSelector as the ``labelSelector`` query string the API server parses
    (Kubernetes docs, "Labels and Selectors" > "Set-based requirement")."""
    parts = [f"{k}={v}" for k, v in sorted((selector.get("matchLabels") or {}).items())]
    for e in selector.get("matchExpressions") or []:
        key, op, values = e.get("key"), e.get("operator"), e.get("values") or []
        if op == "In":
            parts.append(f"{key} in ({','.join(values)})")
        elif op == "NotIn":
            parts.append(f"{key} notin ({','.join(values)})")
        elif op == "Exists":
            parts.append(str(key))
        elif op == "DoesNotExist":
            parts.append(f"!{key}")
        else:
            raise ValueError(f"unknown label selector operator {op!r}")
    return ",".join(parts)


def _epoch(text: Any) -> float:
    if not isinstance(text, str) or not text:
        return float("nan")
    try:
        return pd.Timestamp(text).timestamp()
    except ValueError:
        return float("nan")


def _owned_by(obj: Mapping[str, Any], uid: str) -> bool:
    return any(r.get("uid") == uid for r in obj.get("metadata", {}).get("ownerReferences") or [])


def _ready_at(pod: Mapping[str, Any]) -> float | None:
    """The Ready instant, NaN while not Ready, None when the Pod is not measurable."""
    if pod.get("metadata", {}).get("deletionTimestamp"):
        return None
    st = pod.get("status") or {}
    if any((c.get("restartCount") or 0) > 0 for c in st.get("containerStatuses") or []):
        return None
    for c in st.get("conditions") or []:
        if c.get("type") == "Ready":
            ready = c.get("status") == "True"
            return _epoch(c.get("lastTransitionTime")) if ready else float("nan")
    return float("nan")


def pod_times(pods: list[Mapping[str, Any]], owner_uid: str, revision: str) -> PodTimes:
    """Pure: the measurable Pods of ``pods`` owned by ``owner_uid``."""
    created: list[float] = []
    ready: list[float] = []
    for pod in pods:
        if not _owned_by(pod, owner_uid):
            continue
        at = _ready_at(pod)
        if at is None:
            continue
        created.append(_epoch(pod.get("metadata", {}).get("creationTimestamp")))
        ready.append(at)
    return PodTimes(created, ready, revision)


def _raw(call: Any, *args: Any, **kw: Any) -> dict[str, Any]:
    resp = call(*args, _preload_content=False, **kw)
    return json.loads(resp.data)


def read_pod_times(api: k8s.ApiClient, namespace: str, target: tuple[str, str, str], *,
                   timeout: float) -> tuple[PodTimes | None, str | None]:  # fmt: skip
    """(the current revision's Pod times, None), or (None, why they cannot be read)."""
    api_version, kind, name = target
    if api_version != "apps/v1" or kind not in SUPPORTED_KINDS:
        return None, (f"leadTime auto supports apps/v1 {' and '.join(SUPPORTED_KINDS)} "
                      f"targets, not {api_version} {kind}")  # fmt: skip
    apps, core = k8s.AppsV1Api(api), k8s.CoreV1Api(api)
    try:
        if kind == "Deployment":
            owner = _raw(apps.read_namespaced_deployment, name, namespace,
                         _request_timeout=timeout)  # fmt: skip
        else:
            owner = _raw(apps.read_namespaced_stateful_set, name, namespace,
                         _request_timeout=timeout)  # fmt: skip
    except ApiException as e:
        if e.status == 404:
            return None, f"the HPA's scale target {kind} {name} was not found"
        raise
    selector = selector_string((owner.get("spec") or {}).get("selector") or {})
    if kind == "Deployment":
        revision = (owner["metadata"].get("annotations") or {}).get(REVISION_ANNOTATION)
        sets = _raw(apps.list_namespaced_replica_set, namespace, label_selector=selector,
                    _request_timeout=timeout)["items"]  # fmt: skip
        current = [rs for rs in sets if _owned_by(rs, owner["metadata"]["uid"])
                   and (rs["metadata"].get("annotations") or {}).get(REVISION_ANNOTATION)
                   == revision]  # fmt: skip
        if not current:
            return PodTimes([], [], f"{kind} {name} (no ReplicaSet yet)"), None
        rs = current[0]
        pods = _raw(core.list_namespaced_pod, namespace, label_selector=selector,
                    _request_timeout=timeout)["items"]  # fmt: skip
        return pod_times(pods, rs["metadata"]["uid"], f"ReplicaSet {rs['metadata']['name']}"), None
    revision = (owner.get("status") or {}).get("updateRevision") or ""
    sel = f"{selector},controller-revision-hash={revision}" if revision else selector
    pods = _raw(core.list_namespaced_pod, namespace, label_selector=sel,
                _request_timeout=timeout)["items"]  # fmt: skip
    where = f"StatefulSet {name} revision {revision}"
    return pod_times(pods, owner["metadata"]["uid"], where), None
