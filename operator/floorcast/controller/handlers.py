"""kopf wiring: when to reconcile. All the deciding is in ``decide``, the doing in ``reconcile``.

Triggers (level-triggered; every one runs the same full reconcile):

* create / update / resume of a policy, and a timer (``--interval``, default 30 s);
* a change to a ConfigMap labelled ``floorcast.dev/forecast=true``: the policies that
  reference it (found through an in-memory index, not a list call) are reconciled at
  once, so a new forecast acts in about a second without polling every object;
* deletion, through kopf's finalizer: the baseline is restored before the policy goes.

Two in-memory indexes (filled before any handler runs; kopf guarantees that) also
give the conflict check — which policies target one HPA — without API calls.

kopf itself runs standalone (no kopf peering). Several replicas are safe with
``--leader-elect`` (controller/leader.py): only the Lease holder starts kopf at all.
"""

from __future__ import annotations

import logging
from typing import Any

import kopf

from floorcast.controller.reconcile import Runtime, reconcile
from floorcast.controller.settings import FORECAST_LABEL
from floorcast.kube.policies import GROUP, PLURAL, VERSION

log = logging.getLogger("floorcast.operator")
_RESOURCE = (GROUP, VERSION, PLURAL)


def _lookups(by_target: kopf.Index, configmaps: kopf.Index) -> dict[str, Any]:
    def targets(ns: str, name: str) -> list[tuple[str, str]]:
        return list(by_target.get((ns, name), []))

    def cms(ns: str, name: str) -> tuple[dict[str, str], str] | None:
        for value in configmaps.get((ns, name), []):
            return value
        return None

    return {"targets": targets, "configmaps": cms}


def register(registry: kopf.OperatorRegistry, rt: Runtime) -> None:
    """Register every handler with settings known only at run time (the timer interval)."""
    s = rt.settings

    @kopf.index(*_RESOURCE, id="fsp_by_target", registry=registry)
    def fsp_by_target(namespace: str, name: str, spec: kopf.Spec, meta: kopf.Meta,
                      **_: Any) -> dict[Any, Any]:  # fmt: skip
        target = (spec.get("targetRef") or {}).get("name")
        return {(namespace, target): (str(meta.get("creationTimestamp", "")), name)}

    @kopf.index(*_RESOURCE, id="fsp_by_configmap", registry=registry)
    def fsp_by_configmap(namespace: str, name: str, spec: kopf.Spec,
                         **_: Any) -> dict[Any, Any]:  # fmt: skip
        ref = (spec.get("forecast") or {}).get("configMapRef") or {}
        return {(namespace, ref["name"]): name} if ref.get("name") else {}

    @kopf.index("", "v1", "configmaps", labels={FORECAST_LABEL: "true"},
                id="forecast_configmaps", registry=registry)  # fmt: skip
    def forecast_configmaps(namespace: str, name: str, body: kopf.Body,
                            **_: Any) -> dict[Any, Any]:  # fmt: skip
        data = dict(body.get("data") or {})
        return {(namespace, name): (data, body.get("metadata", {}).get("resourceVersion"))}

    def run(body: kopf.Body, fsp_by_target: kopf.Index, forecast_configmaps: kopf.Index,
            deleting: bool = False) -> None:  # fmt: skip
        reconcile(rt, body, deleting=deleting, **_lookups(fsp_by_target, forecast_configmaps))

    @kopf.on.resume(*_RESOURCE, id="reconcile", registry=registry)
    @kopf.on.create(*_RESOURCE, id="reconcile", registry=registry)
    @kopf.on.update(*_RESOURCE, id="reconcile", registry=registry)
    def on_change(body: kopf.Body, fsp_by_target: kopf.Index, forecast_configmaps: kopf.Index,
                  **_: Any) -> None:  # fmt: skip
        try:
            run(body, fsp_by_target, forecast_configmaps)
        except Exception as e:
            raise kopf.TemporaryError(f"reconcile failed: {e}", delay=s.interval_seconds) from e

    @kopf.timer(*_RESOURCE, id="timer", interval=s.interval_seconds, registry=registry)
    def on_timer(body: kopf.Body, fsp_by_target: kopf.Index, forecast_configmaps: kopf.Index,
                 meta: kopf.Meta, **_: Any) -> None:  # fmt: skip
        if meta.get("deletionTimestamp"):
            return
        try:
            run(body, fsp_by_target, forecast_configmaps)
        except Exception as e:  # the next tick tries again; never crash the timer
            log.warning("%s/%s: reconcile failed: %s", meta.get("namespace"), meta.get("name"), e)

    @kopf.on.delete(*_RESOURCE, id="restore", registry=registry)
    def on_delete(body: kopf.Body, fsp_by_target: kopf.Index, forecast_configmaps: kopf.Index,
                  **_: Any) -> None:  # fmt: skip
        try:
            run(body, fsp_by_target, forecast_configmaps, deleting=True)
        except Exception as e:  # keep the finalizer until the baseline is back
            raise kopf.TemporaryError(f"restore failed: {e}", delay=5) from e

    @kopf.on.event("", "v1", "configmaps", labels={FORECAST_LABEL: "true"},
                   id="forecast_changed", registry=registry)  # fmt: skip
    def on_forecast(event: dict[str, Any], namespace: str, name: str,
                    fsp_by_configmap: kopf.Index, fsp_by_target: kopf.Index,
                    forecast_configmaps: kopf.Index, **_: Any) -> None:  # fmt: skip
        if event.get("type") not in ("ADDED", "MODIFIED", "DELETED"):
            return  # the initial listing: resume handlers already reconcile everything
        from kubernetes import client as k8s
        from kubernetes.client.rest import ApiException

        api = k8s.CustomObjectsApi(rt.api)
        for policy in list(fsp_by_configmap.get((namespace, name), [])):
            try:
                body = api.get_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL,
                                                        policy)  # fmt: skip
                if body.get("metadata", {}).get("deletionTimestamp"):
                    continue
                run(body, fsp_by_target, forecast_configmaps)
            except ApiException as e:
                if e.status != 404:
                    log.warning("%s/%s: reconcile on forecast change failed: %s",
                                namespace, policy, e)  # fmt: skip
            except Exception as e:
                log.warning("%s/%s: reconcile on forecast change failed: %s", namespace, policy, e)
