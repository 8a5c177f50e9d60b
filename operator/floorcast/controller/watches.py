"""The operator's watches: one informer per resource kind and scope, wired to the
callbacks in handlers.py, and the start-up barrier — the workers start only once every
informer has listed, so no policy is judged against a half-listed cache."""

from __future__ import annotations

import logging
import time
from functools import partial

from floorcast.controller import handlers
from floorcast.controller.informer import Informer, scope_path
from floorcast.controller.reconcile import Runtime
from floorcast.controller.settings import FORECAST_LABEL
from floorcast.kube.policies import GROUP, PLURAL, VERSION

log = logging.getLogger("floorcast.operator")

#: (group, version, plural, label selector, (on_replace, on_event))
KINDS = (
    (GROUP, VERSION, PLURAL, None, (handlers.policies_listed, handlers.policy_event)),
    ("", "v1", "configmaps", f"{FORECAST_LABEL}=true",
     (handlers.configmaps_listed, handlers.configmap_event)),
    ("autoscaling", "v2", "horizontalpodautoscalers", None,
     (handlers.hpas_listed, handlers.hpa_event)),
)  # fmt: skip


def informers(rt: Runtime) -> list[Informer]:
    scopes: tuple[str | None, ...] = (None,) if rt.settings.all_namespaces else tuple(
        rt.settings.namespaces)  # fmt: skip
    return [
        Informer(api=rt.api, path=scope_path(g, v, plural, ns), label_selector=sel,
                 on_replace=partial(listed, rt), on_event=partial(event, rt),
                 request_timeout=max(30.0, rt.settings.api_timeout_seconds))
        for g, v, plural, sel, (listed, event) in KINDS
        for ns in scopes
    ]


def start(rt: Runtime, watches: list[Informer], *, report_every: float = 30.0) -> float:
    """Start every informer and block until all have listed; returns the seconds it
    took. A kind that cannot be listed (RBAC, a missing CRD) keeps the operator here,
    logging why every ``report_every`` seconds, rather than acting on partial state."""
    began = time.monotonic()
    for w in watches:
        w.start()
    for w in watches:
        while not w.synced.wait(report_every):
            log.warning("start-up: still waiting for the first listing of %s (%.0fs)",
                        w.path, time.monotonic() - began)  # fmt: skip
    rt.caches.bound = True
    took = time.monotonic() - began
    log.info("start-up: listed %d policies, %d forecast ConfigMaps, %d HPAs in %.1fs",
             len(rt.caches), len(rt.caches.configmap_keys()), len(rt.caches.hpa_keys()),
             took)  # fmt: skip
    return took


def stop(watches: list[Informer]) -> None:
    for w in watches:
        w.stopping.set()
    for w in watches:
        w.stop(timeout=2.0)
