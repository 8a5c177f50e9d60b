"""The informers' callbacks (controller/handlers.py) on scripted listings and events:
what a listing or a re-list wakes, and what it reports as deleted.

Pure logic over the real Caches and WorkQueue; the informers that feed these from a
real API server are tested in e2e/test_informer.py and e2e/test_operator.py.
"""

from __future__ import annotations

from typing import Any

from floorcast.controller import handlers
from floorcast.controller.reconcile import Runtime
from floorcast.controller.settings import Settings


def policy(name: str, hpa: str, cm: str, generation: int = 1,
           next_at: str | None = None) -> dict[str, Any]:  # fmt: skip
    body: dict[str, Any] = {
        "metadata": {"namespace": "shop", "name": name, "generation": generation,
                     "creationTimestamp": "2026-01-01T00:00:00Z"},
        "spec": {"targetRef": {"name": hpa}, "forecast": {"configMapRef": {"name": cm}}},
    }  # fmt: skip
    if next_at:
        body["status"] = {"nextChange": {"at": next_at}}
    return body


def hpa(name: str, min_replicas: int = 2, version: str = "1", current: int = 3) -> dict[str, Any]:
    return {
        "metadata": {"namespace": "shop", "name": name, "resourceVersion": version},
        "spec": {"minReplicas": min_replicas, "maxReplicas": 20,
                 "scaleTargetRef": {"apiVersion": "apps/v1", "kind": "Deployment", "name": name}},
        "status": {"currentReplicas": current},
    }  # fmt: skip


def configmap(name: str, version: str) -> dict[str, Any]:
    return {"metadata": {"namespace": "shop", "name": name, "resourceVersion": version},
            "data": {"forecast.json": "{}"}}  # fmt: skip


def drain(rt: Runtime) -> list[tuple[str, str]]:
    """Every key due now, in the order the workers would take them."""
    out = []
    while (key := rt.queue.get(timeout=0)) is not None:
        out.append(key)
        rt.queue.done(key)
    return out


def listed_runtime() -> Runtime:
    rt = Runtime(settings=Settings(metrics_port=None, liveness_port=None), api=None)
    handlers.policies_listed(rt, [policy("cart", "cart", "cart-fc"),
                                  policy("search", "search", "search-fc")])  # fmt: skip
    handlers.configmaps_listed(rt, [configmap("cart-fc", "10"), configmap("search-fc", "11")])
    handlers.hpas_listed(rt, [hpa("cart"), hpa("search")])
    rt.caches.bound = True  # watches.start does this once all three have listed
    drain(rt)
    return rt


def test_first_listing_queues_every_policy_nearest_change_first() -> None:
    rt = Runtime(settings=Settings(metrics_port=None, liveness_port=None), api=None)
    handlers.policies_listed(rt, [
        policy("late", "a", "a", next_at="2026-01-01T03:00:00Z"),
        policy("never-planned", "b", "b"),
        policy("soon", "c", "c", next_at="2026-01-01T01:00:00Z"),
    ])  # fmt: skip
    assert [k[1] for k in drain(rt)] == ["never-planned", "soon", "late"]


def test_relist_of_policies_wakes_only_changes_and_deletes_what_is_missing() -> None:
    rt = listed_runtime()
    # "search" vanished while the watch was down; "cart" came back with only a new status.
    status_only = policy("cart", "cart", "cart-fc", next_at="2026-01-01T05:00:00Z")
    handlers.policies_listed(rt, [status_only])
    assert drain(rt) == [("shop", "search")]  # the deleting reconcile, nothing for cart
    body, deleted = rt.caches.body(("shop", "search"))
    assert deleted and body is not None and body["metadata"]["name"] == "search"
    assert rt.caches.users_of_hpa(("shop", "search")) == []  # out of the indexes
    # A spec change (new generation) in a re-list wakes the policy.
    handlers.policies_listed(rt, [policy("cart", "cart", "cart-fc", generation=2)])
    assert drain(rt) == [("shop", "cart")]


def test_relist_of_configmaps_reports_deletions_and_version_changes() -> None:
    rt = listed_runtime()
    handlers.configmaps_listed(rt, [configmap("cart-fc", "10")])  # search-fc gone
    assert drain(rt) == [("shop", "search")]
    assert rt.caches.configmap("shop", "search-fc") is None
    assert rt.caches.configmap("shop", "cart-fc") == ({"forecast.json": "{}"}, "10")
    handlers.configmaps_listed(rt, [configmap("cart-fc", "12")])
    assert drain(rt) == [("shop", "cart")]


def test_relist_of_hpas_reports_deletions_and_ignores_status_only_changes() -> None:
    rt = listed_runtime()
    # cart's HPA only changed its status (the HPA controller's every sync): nothing wakes.
    handlers.hpas_listed(rt, [hpa("cart", version="7", current=9), hpa("search")])
    assert drain(rt) == []
    assert rt.caches.hpa("shop", "cart").current_replicas == 9  # stored for observation
    # search's HPA is gone: its policy must learn that.
    handlers.hpas_listed(rt, [hpa("cart", version="7", current=9)])
    assert drain(rt) == [("shop", "search")]
    assert rt.caches.hpa("shop", "search").exists is False
    # A hand edit of cart's minReplicas is an input.
    handlers.hpas_listed(rt, [hpa("cart", min_replicas=5, version="8", current=9)])
    assert drain(rt) == [("shop", "cart")]


def test_events_before_all_watches_listed_wake_nothing() -> None:
    rt = Runtime(settings=Settings(metrics_port=None, liveness_port=None), api=None)
    handlers.policies_listed(rt, [policy("cart", "cart", "cart-fc")])
    drain(rt)
    handlers.configmap_event(rt, "ADDED", configmap("cart-fc", "3"))
    handlers.hpa_event(rt, "ADDED", hpa("cart"))
    assert drain(rt) == []  # the first reconcile comes once every kind has listed
    assert rt.caches.hpa("shop", "cart") is None  # not bound yet: the caller reads it
