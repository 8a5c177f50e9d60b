"""One reconcile: observe through the adapters, ``decide``, carry the decision out.

Order matters for crash safety: the HPA patch (which records baseline and floor on the
HPA itself) goes first, status second. A crash between the two leaves the HPA's
annotations telling the next run the truth, so it converges without losing the
baseline. A 409 on the HPA means someone wrote it since we read it; we re-read and
decide again, at most a few times, rather than overwrite their change.
"""

from __future__ import annotations

import logging
import os
import signal
import threading
import time
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import pandas as pd
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from floorcast.controller import metrics
from floorcast.controller.capacity import per_replica_from_hpa
from floorcast.controller.decide import conflict_winner, decide
from floorcast.controller.settings import FORECAST_LABEL, Settings
from floorcast.controller.state import Decision, ForecastState, HpaState, Observed
from floorcast.kube import policies
from floorcast.kube.hpa import Conflict, patch_hpa, read_hpa
from floorcast.kube.workload import read_pod_spec
from floorcast.policy import Policy, PolicyError, parse_policy
from floorcast.sources.configmap import ParsedCache, forecast_from_configmap
from floorcast.sources.http import UrlCache, forecast_from_url

log = logging.getLogger("floorcast.operator")
CONFLICT_RETRIES = 3
#: Fault injection for the crash-consistency e2e test: SIGKILL ourselves right after
#: the HPA patch, before the status write. Never set in production.
FAULT_ENV = "FLOORCAST_FAULT_KILL_AFTER_HPA_PATCH"

#: (namespace, configmap name) -> (data, resourceVersion), from the operator's watch.
ConfigMapLookup = Callable[[str, str], tuple[dict[str, str], str] | None]
#: (namespace, hpa name) -> [(creationTimestamp, policy name)] of all policies on it.
TargetLookup = Callable[[str, str], Iterable[tuple[str, str]]]


def plain(obj: Any) -> Any:
    """kopf bodies are read-only views; the policy parser wants plain dicts and lists."""
    if isinstance(obj, Mapping):
        return {k: plain(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [plain(v) for v in obj]
    return obj


@dataclass
class Runtime:
    """What every reconcile shares: settings, one API client, caches, per-policy locks."""

    settings: Settings
    api: k8s.ApiClient
    cache: ParsedCache = field(default_factory=ParsedCache)
    url_cache: UrlCache = field(default_factory=UrlCache)
    _locks: dict[tuple[str, str], threading.Lock] = field(default_factory=dict)
    _guard: threading.Lock = field(default_factory=threading.Lock)
    #: The status we last wrote per policy. The status is ours alone, and kopf's body can
    #: lag behind our own write (a timer firing before the watch event arrives); deciding
    #: on the stale copy would rewrite the status with a new lastTransitionTime.
    written: dict[tuple[str, str], dict[str, Any]] = field(default_factory=dict)

    def lock(self, namespace: str, name: str) -> threading.Lock:
        with self._guard:
            return self._locks.setdefault((namespace, name), threading.Lock())

    def forget(self, namespace: str, name: str) -> None:
        with self._guard:
            self._locks.pop((namespace, name), None)
            self.written.pop((namespace, name), None)
        metrics.forget(namespace, name)


def _policy(body: Mapping[str, Any], source: str) -> tuple[Policy | None, str | None]:
    doc = {k: v for k, v in body.items() if k != "status"}
    try:
        return parse_policy(doc, source=source), None
    except PolicyError as e:
        return None, str(e)


def _forecast(rt: Runtime, p: Policy, configmaps: ConfigMapLookup | None) -> ForecastState:
    src, s = p.spec.forecast, rt.settings
    if src.url is not None:
        return forecast_from_url(src.url, s, rt.url_cache)
    assert src.config_map_ref is not None
    ref = src.config_map_ref
    hit = configmaps(p.namespace, ref.name) if configmaps else None
    if hit is None:  # not labelled for the watch, or not seen yet: read it
        data, rv = policies.read_configmap(rt.api, p.namespace, ref.name,
                                           timeout=s.api_timeout_seconds)  # fmt: skip
    else:
        data, rv = hit
    got = forecast_from_configmap(data, namespace=p.namespace, name=ref.name, key=ref.key,
                                  max_bytes=s.max_forecast_bytes, resource_version=rv,
                                  cache=rt.cache)  # fmt: skip
    if hit is None and data is not None and configmaps is not None and got.series is not None:
        got = replace(got, note=f"ConfigMap {ref.name} is not labelled {FORECAST_LABEL}=true, "
                                "so it is read on every timer tick and a change waits for "
                                "the next tick")  # fmt: skip
    return got


def observe(rt: Runtime, body: Mapping[str, Any], *, deleting: bool,
            configmaps: ConfigMapLookup | None, targets: TargetLookup | None,
            hpa: HpaState | None = None,
            forecast: ForecastState | None = None) -> Observed:  # fmt: skip
    meta = body.get("metadata", {})
    ns, name = meta["namespace"], meta["name"]
    pol, err = _policy(body, f"ForecastScalingPolicy {ns}/{name}")
    conflict = None
    if pol is not None and targets is not None:
        me = (str(meta.get("creationTimestamp", "")), name)
        rivals = [r for r in targets(ns, pol.spec.target_name) if r[1] != name]
        conflict = conflict_winner(me, rivals)
    target = pol.spec.target_name if pol else (body.get("spec", {}).get("targetRef") or {}).get(
        "name")  # fmt: skip
    if hpa is None:
        hpa = (read_hpa(rt.api, ns, target, timeout=rt.settings.api_timeout_seconds)
               if target else HpaState(exists=False))  # fmt: skip
    needs = pol is not None and not deleting and conflict is None and hpa.exists
    if forecast is None:
        forecast = _forecast(rt, pol, configmaps) if needs and pol else ForecastState()
    per_replica, per_replica_error = _capacity(rt, ns, pol, hpa) if needs else (None, None)
    return Observed(
        name=name, namespace=ns, policy=pol, hpa=hpa, forecast=forecast,
        now=pd.Timestamp.now(tz="UTC").floor("s"),
        status=rt.written.get((ns, name)) or plain(body.get("status") or {}),
        generation=meta.get("generation"), policy_error=err,
        operator_dry_run=rt.settings.dry_run, conflict_with=conflict, deleting=deleting,
        per_replica=per_replica, per_replica_error=per_replica_error,
    )  # fmt: skip


def _capacity(rt: Runtime, ns: str, pol: Policy | None,
              hpa: HpaState) -> tuple[float | None, str | None]:  # fmt: skip
    """capacity.fromHPA: read the scale target (read-only) and derive cores per replica."""
    if pol is None or not pol.spec.capacity.from_hpa or not hpa.exists:
        return None, None
    if hpa.cpu_target_utilization is None or hpa.scale_target is None:
        return per_replica_from_hpa(hpa, None)
    spec, why = read_pod_spec(rt.api, ns, hpa.scale_target,
                              timeout=rt.settings.api_timeout_seconds)  # fmt: skip
    return (None, why) if why else per_replica_from_hpa(hpa, spec)


def reconcile(rt: Runtime, body: Mapping[str, Any], *, deleting: bool = False,
              configmaps: ConfigMapLookup | None = None,
              targets: TargetLookup | None = None) -> Decision:  # fmt: skip
    """Reconcile one policy; raises on API trouble (the caller retries later)."""
    meta = body.get("metadata", {})
    ns, name, uid = meta["namespace"], meta["name"], meta.get("uid")
    started = time.monotonic()
    timeout = rt.settings.api_timeout_seconds
    try:
        with rt.lock(ns, name):
            forecast = None
            for attempt in range(CONFLICT_RETRIES + 1):
                obs = observe(rt, body, deleting=deleting, configmaps=configmaps,
                              targets=targets, forecast=forecast)  # fmt: skip
                forecast = obs.forecast  # a retry after 409 re-reads the HPA only
                d = decide(obs)
                if d.hpa_patch is None:
                    break
                target = obs.policy.spec.target_name if obs.policy else None
                try:
                    assert target is not None
                    patch_hpa(rt.api, ns, target, d.hpa_patch, timeout=timeout)
                except Conflict:
                    metrics.ERRORS.labels("Conflict").inc()
                    if attempt == CONFLICT_RETRIES:
                        raise
                    continue
                metrics.PATCHES.labels(ns, name).inc()
                if os.environ.get(FAULT_ENV):
                    log.warning("%s set: killing the operator after the HPA patch", FAULT_ENV)
                    os.kill(os.getpid(), signal.SIGKILL)
                break
            for ev in d.events:
                try:
                    policies.post_event(rt.api, ns, name, uid, ev, timeout=timeout)
                except ApiException as e:  # an Event is best effort; the status says it all
                    log.warning("%s/%s: could not post Event %s: %s", ns, name, ev.reason, e)
            if d.status is not None and d.status_changed:
                policies.write_status(rt.api, ns, name, d.status, obs.status, timeout=timeout)
                rt.written[(ns, name)] = d.status
        log.info("%s", d.log)
        if deleting:
            rt.forget(ns, name)
        else:
            metrics.record(ns, name, d)
        return d
    except Conflict:
        raise
    except ApiException as e:
        metrics.ERRORS.labels(f"Api{e.status or 'Error'}").inc()
        raise
    except Exception as e:
        metrics.ERRORS.labels(type(e).__name__).inc()
        raise
    finally:
        metrics.DURATION.observe(time.monotonic() - started)
