"""Policy status and Events: the operator's only writes besides the HPA patch.

Status is written through the status subresource as a merge patch, and only when the
decision says it changed, so an idle operator makes no writes at all. Events go to
core v1 with the policy as the involved object, where ``kubectl describe fsp`` shows
them.
"""

from __future__ import annotations

import datetime as dt
import secrets
from collections.abc import Mapping
from typing import Any

from kubernetes import client as k8s

from floorcast.controller.state import STATUS_KEYS, Event
from floorcast.policy import API_VERSION, KIND

GROUP, VERSION, PLURAL = "floorcast.dev", "v1alpha1", "forecastscalingpolicies"
MERGE_PATCH = "application/merge-patch+json"


def status_patch(desired: Mapping[str, Any], current: Mapping[str, Any]) -> dict[str, Any]:
    """Merge-patch body that makes our keys equal ``desired`` (null removes a key).

    Nested blocks too: a merge patch merges mappings (RFC 7386), so a figure the
    decision no longer publishes (``accuracy.error`` once the guard cannot judge)
    would otherwise stay behind, stale, and the status would never compare equal
    again, rewriting it on every reconcile."""
    body: dict[str, Any] = {k: None for k in STATUS_KEYS if k in current and k not in desired}
    body.update({k: _replace(v, current.get(k)) for k, v in desired.items()})
    return {"status": body}


def _replace(want: Any, have: Any) -> Any:
    """``want``, with a null for every key of the mapping ``have`` that it drops."""
    if not isinstance(want, Mapping) or not isinstance(have, Mapping):
        return want
    out: dict[str, Any] = {k: None for k in have if k not in want}
    out.update({k: _replace(v, have.get(k)) for k, v in want.items()})
    return out


def write_status(api: k8s.ApiClient, namespace: str, name: str, desired: Mapping[str, Any],
                 current: Mapping[str, Any], *, timeout: float) -> None:  # fmt: skip
    k8s.CustomObjectsApi(api).patch_namespaced_custom_object_status(
        GROUP, VERSION, namespace, PLURAL, name, status_patch(desired, current),
        _content_type=MERGE_PATCH, _request_timeout=timeout,
    )  # fmt: skip


def post_event(api: k8s.ApiClient, namespace: str, name: str, uid: str | None, event: Event,
               *, timeout: float) -> None:  # fmt: skip
    now = dt.datetime.now(dt.UTC)
    body = k8s.CoreV1Event(
        metadata=k8s.V1ObjectMeta(name=f"{name}.{secrets.token_hex(8)}", namespace=namespace),
        involved_object=k8s.V1ObjectReference(
            api_version=API_VERSION, kind=KIND, name=name, namespace=namespace, uid=uid
        ),
        type=event.type,
        reason=event.reason,
        message=event.message[:1024],
        source=k8s.V1EventSource(component="floorcast"),
        first_timestamp=now,
        last_timestamp=now,
        count=1,
    )
    k8s.CoreV1Api(api).create_namespaced_event(namespace, body, _request_timeout=timeout)


def read_configmap(api: k8s.ApiClient, namespace: str, name: str, *,
                   timeout: float) -> tuple[dict[str, str] | None, str | None]:  # fmt: skip
    """(data, resourceVersion), or (None, None) if it does not exist."""
    from kubernetes.client.rest import ApiException

    try:
        cm = k8s.CoreV1Api(api).read_namespaced_config_map(name, namespace,
                                                           _request_timeout=timeout)  # fmt: skip
    except ApiException as e:
        if e.status == 404:
            return None, None
        raise
    return dict(cm.data or {}), cm.metadata.resource_version
