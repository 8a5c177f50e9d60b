"""kopf wiring: what wakes a policy. The deciding is in ``decide``, the doing in
``reconcile``, the waking order in ``workqueue`` and ``schedule``.

kopf is used for its watches and indexes only (docs/operations.md, "When the operator
reconciles"); every handler here is an ``on.event`` handler that records what it saw
and queues the policies it concerns. Worker threads (controller/workers.py) take keys
from the queue and run the one level-triggered reconcile, which says when it wants to
run next. So:

* a policy is reconciled when it changes (spec, deletion), when its forecast
  ConfigMap (labelled ``floorcast.dev/forecast=true``) changes, when its HPA's spec or
  our annotations on it change, at its next planned floor change, when its forecast
  goes stale, and on a slow jittered resync (``--interval``, default 10 min);
* at start the initial listing queues every policy, nearest planned change first;
* nothing polls: with nothing changing, a policy costs one reconcile per resync and no
  API request (its HPA and forecast come from the watches' caches).

Indexes (kopf fills them before any handler runs, so a policy is never judged against
a half-listed cache): policies by target HPA (the conflict check) and by ConfigMap, the
labelled forecast ConfigMaps' data, and every watched HPA, read into ``HpaState``.

kopf's own finalizer and progress annotations are not used: the operator adds its
finalizer only before it first raises a floor (reconcile.py), so a policy that never
raised one can always be deleted, even with the operator gone.
"""

from __future__ import annotations

import logging
from typing import Any

import kopf

from floorcast.controller.reconcile import Runtime
from floorcast.controller.settings import FORECAST_LABEL
from floorcast.kube.hpa import fingerprint, hpa_from_body
from floorcast.kube.policies import GROUP, PLURAL, VERSION

log = logging.getLogger("floorcast.operator")
_RESOURCE = (GROUP, VERSION, PLURAL)
_HPA = ("autoscaling", "v2", "horizontalpodautoscalers")


def _urgency(body: kopf.Body) -> float:
    """Start-up priority: the epoch second of the policy's next planned change (a
    policy with none recorded — new, or never planned — goes first)."""
    import pandas as pd

    at = ((body.get("status") or {}).get("nextChange") or {}).get("at")
    try:
        return pd.Timestamp(at).timestamp() if isinstance(at, str) else 0.0
    except ValueError:
        return 0.0


def _inputs(body: kopf.Body) -> tuple[Any, ...]:
    """What in a policy's own object is an input: not its status (our own writes
    echo back as events and must not wake it again)."""
    meta = body.get("metadata") or {}
    return (meta.get("generation"), meta.get("deletionTimestamp"),
            tuple(meta.get("finalizers") or ()))  # fmt: skip


def register(registry: kopf.OperatorRegistry, rt: Runtime) -> None:
    """Register the indexes and event handlers; they only record and queue."""

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

    @kopf.index(*_HPA, id="hpas", registry=registry)
    def hpas(namespace: str, name: str, body: kopf.Body, **_: Any) -> dict[Any, Any]:
        return {(namespace, name): hpa_from_body(body)}

    @kopf.on.event(*_RESOURCE, id="policy", registry=registry)
    def on_policy(event: dict[str, Any], namespace: str, name: str, body: kopf.Body,
                  fsp_by_target: kopf.Index, forecast_configmaps: kopf.Index,
                  hpas: kopf.Index, **_: Any) -> None:  # fmt: skip
        rt.caches.bind(fsp_by_target, forecast_configmaps, hpas)
        key, kind = (namespace, name), event.get("type")
        if kind == "DELETED":
            rt.caches.gone(key, body)
            rt.queue.add(key)  # a last, deleting reconcile (workers.py)
            return
        changed = rt.caches.remember(key, body, _inputs(body))
        if kind is None:  # the initial listing (start-up, or a re-list)
            rt.queue.add(key, priority=_urgency(body))
        elif changed:
            rt.queue.add(key)

    @kopf.on.event("", "v1", "configmaps", labels={FORECAST_LABEL: "true"},
                   id="forecast_changed", registry=registry)  # fmt: skip
    def on_forecast(event: dict[str, Any], namespace: str, name: str,
                    fsp_by_configmap: kopf.Index, **_: Any) -> None:  # fmt: skip
        if event.get("type") is None:
            return  # the initial listing: the policies' own listing queues them
        for policy in list(fsp_by_configmap.get((namespace, name), [])):
            rt.queue.add((namespace, policy))

    @kopf.on.event(*_HPA, id="hpa_changed", registry=registry)
    def on_hpa(event: dict[str, Any], namespace: str, name: str, body: kopf.Body,
               fsp_by_target: kopf.Index, **_: Any) -> None:  # fmt: skip
        gone = event.get("type") == "DELETED"
        state = hpa_from_body(body)
        new = ("deleted",) if gone else fingerprint(state)
        if not rt.caches.hpa_changed((namespace, name), new) or event.get("type") is None:
            return  # status only (or the initial listing): nothing to decide anew
        for _, policy in list(fsp_by_target.get((namespace, name), [])):
            rt.queue.add((namespace, policy))
