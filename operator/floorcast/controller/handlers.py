"""What wakes a policy: the informers' callbacks (controller/informer.py). The deciding
is in ``decide``, the doing in ``reconcile``, the waking order in ``workqueue`` and
``schedule``.

Three kinds are watched, once per namespace given (or once cluster-wide):
ForecastScalingPolicies, ConfigMaps labelled ``floorcast.dev/forecast=true`` and HPAs.
Every callback here records what it saw in ``Caches`` and queues the policies it
concerns; worker threads (controller/workers.py) run the one level-triggered reconcile,
which says when it wants to run next. So:

* a policy is reconciled when it changes (spec, deletion), when its forecast
  ConfigMap changes, when its HPA's spec or our annotations on it change, at its next
  planned floor change, when its forecast goes stale, and in its resync slot once per period
  (``--interval``, default 10 min);
* at start the policies' listing queues every policy, nearest planned change first,
  and the workers start only once all three kinds have listed (app.py);
* nothing polls: with nothing changing, a policy costs one reconcile per resync and no
  API request (its HPA and forecast come from the caches).

A re-list (after the watch's version expired) is compared with the cache: what is
missing was deleted meanwhile, what changed wakes its policies, as an event would have.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Hashable
from typing import Any

import pandas as pd

from floorcast.controller.reconcile import Runtime
from floorcast.controller.watched import Key, key_of
from floorcast.kube.hpa import fingerprint, hpa_from_body

log = logging.getLogger("floorcast.operator")


def _urgency(body: dict[str, Any]) -> float:
    """Start-up priority: the epoch second of the policy's next planned change (a
    policy with none recorded — new, or never planned — goes first)."""
    at = ((body.get("status") or {}).get("nextChange") or {}).get("at")
    try:
        return pd.Timestamp(at).timestamp() if isinstance(at, str) else 0.0
    except ValueError:
        return 0.0


def _inputs(body: dict[str, Any]) -> Hashable:
    """What in a policy's own object is an input: not its status (our own writes
    echo back as events and must not wake it again)."""
    meta = body.get("metadata") or {}
    return (meta.get("generation"), meta.get("deletionTimestamp"),
            tuple(meta.get("finalizers") or ()))  # fmt: skip


# Policies --------------------------------------------------------------------------
def policy_event(rt: Runtime, kind: str, body: dict[str, Any]) -> None:
    key = key_of(body)
    if kind == "DELETED":
        rt.caches.gone(key, body)
        rt.queue.add(key)  # a last, deleting reconcile (workers.py)
    elif rt.caches.remember(key, body, _inputs(body)):
        rt.queue.add(key)


def policies_listed(rt: Runtime, items: list[dict[str, Any]]) -> None:
    """The first listing queues everything by urgency; a re-list only the differences."""
    first = not rt.caches.bound
    seen: set[Key] = set()
    for body in items:
        key = key_of(body)
        seen.add(key)
        changed = rt.caches.remember(key, body, _inputs(body))
        if first:
            rt.queue.add(key, priority=_urgency(body))
        elif changed:
            rt.queue.add(key)
    for key in set(rt.caches.keys()) - seen:
        body, _ = rt.caches.body(key)
        policy_event(rt, "DELETED", body or {"metadata": {"namespace": key[0], "name": key[1]}})


# Forecast ConfigMaps ---------------------------------------------------------------
def configmap_event(rt: Runtime, kind: str, obj: dict[str, Any]) -> None:
    key = key_of(obj)
    data = None if kind == "DELETED" else {str(k): str(v) for k, v in
                                           (obj.get("data") or {}).items()}  # fmt: skip
    version = str((obj.get("metadata") or {}).get("resourceVersion") or "")
    if rt.caches.put_configmap(key, data, version) and rt.caches.bound:
        for policy in rt.caches.users_of_configmap(key):
            rt.queue.add(policy)


def _relisted(rt: Runtime, items: list[dict[str, Any]], known: list[Key],
              event: Callable[[Runtime, str, dict[str, Any]], None]) -> None:  # fmt: skip
    """A listing as events: every item an ADDED, every known key it lacks a DELETED."""
    for obj in items:
        event(rt, "ADDED", obj)
    for key in set(known) - {key_of(o) for o in items}:
        event(rt, "DELETED", {"metadata": {"namespace": key[0], "name": key[1]}})


def configmaps_listed(rt: Runtime, items: list[dict[str, Any]]) -> None:
    _relisted(rt, items, rt.caches.configmap_keys(), configmap_event)


# HPAs ------------------------------------------------------------------------------
def hpa_event(rt: Runtime, kind: str, obj: dict[str, Any]) -> None:
    """Only an input change (spec, our annotations) wakes the policies on it; a
    status-only update (every HPA sync) is stored for observation and wakes nothing."""
    key = key_of(obj)
    state = None if kind == "DELETED" else hpa_from_body(obj)
    changed = rt.caches.put_hpa(key, state, fingerprint(state) if state else ("deleted",))
    if changed and rt.caches.bound:
        for policy in rt.caches.users_of_hpa(key):
            rt.queue.add(policy)


def hpas_listed(rt: Runtime, items: list[dict[str, Any]]) -> None:
    _relisted(rt, items, rt.caches.hpa_keys(), hpa_event)
