"""The HPA's scale target, read-only, for ``capacity.fromHPA`` (its pods' CPU requests)."""

from __future__ import annotations

from typing import Any

from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from floorcast.controller.capacity import SUPPORTED_KINDS


def read_pod_spec(api: k8s.ApiClient, namespace: str, target: tuple[str, str, str], *,
                  timeout: float) -> tuple[dict[str, Any] | None, str | None]:  # fmt: skip
    """(the pod template's spec as plain JSON, None), (None, None) if missing, or (None, why)."""
    api_version, kind, name = target
    if api_version != "apps/v1" or kind not in SUPPORTED_KINDS:
        return None, (f"capacity.fromHPA supports apps/v1 {' and '.join(SUPPORTED_KINDS)} "
                      f"targets, not {api_version} {kind}")  # fmt: skip
    apps = k8s.AppsV1Api(api)
    read = (apps.read_namespaced_deployment if kind == "Deployment"
            else apps.read_namespaced_stateful_set)  # fmt: skip
    try:
        obj = read(name, namespace, _request_timeout=timeout)
    except ApiException as e:
        if e.status == 404:
            return None, None
        raise
    return api.sanitize_for_serialization(obj.spec.template.spec), None
