"""One reconcile: observe through the adapters, ``decide``, carry the decision out.

Order matters for crash safety: the HPA patch (which records baseline and floor on the
HPA itself) goes first, status second. A crash between the two leaves the HPA's
annotations telling the next run the truth, so it converges without losing the
baseline. A 409 on the HPA means someone wrote it since we read it; we re-read and
decide again, at most a few times, rather than overwrite their change.

Fail safe (issue #14): a bug or an API failure while handling one policy never leaves
a raised floor behind. Reading the policy, the forecast and the scale target each turn
any exception into a problem ``decide`` restores on; ``decide`` itself is wrapped
(``failsafe.decide_safely``); and if carrying the decision out fails, ``_recover``
re-reads the HPA and restores the baseline on its own before the error propagates.
Status messages name what failed (a type, an HTTP status), never the text that failed.
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

from floorcast.controller import leadtime, metrics
from floorcast.controller.capacity import per_replica_from_hpa
from floorcast.controller.decide import conflict_winner
from floorcast.controller.failsafe import decide_safely, fail_safe
from floorcast.controller.query_load import QueryMemory, query_load
from floorcast.controller.schedule import Periods, next_wake
from floorcast.controller.settings import FORECAST_LABEL, Settings
from floorcast.controller.state import (
    ANN_POLICY,
    FORECAST_INVALID,
    FORECAST_MISSING,
    Decision,
    ForecastState,
    HpaState,
    LiveMemory,
    Observed,
)
from floorcast.controller.watched import Caches, plain
from floorcast.controller.workqueue import WorkQueue
from floorcast.kube import policies
from floorcast.kube.finalizer import FINALIZER, set_finalizer
from floorcast.kube.hpa import Conflict, patch_hpa, read_hpa
from floorcast.kube.pods import read_pod_times
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
    #: The live correction's EWMA per policy (controller/live.py), between reconciles.
    live: dict[tuple[str, str], LiveMemory] = field(default_factory=dict)
    #: The accuracy guard's and the cost's memory per policy (controller/accuracy.py).
    guard: dict[tuple[str, str], Any] = field(default_factory=dict)
    #: What wakes policies (controller/workqueue.py, schedule.py) and what the watches
    #: have shown (controller/watched.py).
    queue: WorkQueue = field(default_factory=WorkQueue)
    caches: Caches = field(default_factory=Caches)
    periods: Periods = field(default_factory=Periods)
    #: Seconds until each policy's next wake, from its last reconcile (workers.py).
    wake_in: dict[tuple[str, str], float] = field(default_factory=dict)
    #: Policies known to carry our finalizer (the watched body may lag our own patch).
    finalized: set[tuple[str, str]] = field(default_factory=set)
    #: ``leadTime: auto``: the last Pod start-ups listed per policy (controller/leadtime.py).
    lead: leadtime.LeadMemory = field(default_factory=leadtime.LeadMemory)
    #: ``observedLoad.prometheusQuery``: the last answer per policy (controller/query_load.py).
    query: QueryMemory = field(default_factory=QueryMemory)

    def lock(self, namespace: str, name: str) -> threading.Lock:
        with self._guard:
            return self._locks.setdefault((namespace, name), threading.Lock())

    def forget(self, namespace: str, name: str) -> None:
        with self._guard:
            self._locks.pop((namespace, name), None)
            self.written.pop((namespace, name), None)
            self.live.pop((namespace, name), None)
            self.guard.pop((namespace, name), None)
            self.wake_in.pop((namespace, name), None)
            self.finalized.discard((namespace, name))
        self.lead.forget((namespace, name))
        self.query.forget((namespace, name))
        metrics.forget(namespace, name)


def _policy(body: Mapping[str, Any], source: str) -> tuple[Policy | None, str | None]:
    doc = {k: v for k, v in body.items() if k != "status"}
    try:
        return parse_policy(doc, source=source), None
    except PolicyError as e:
        return None, str(e)
    except Exception as e:  # a parser bug: the policy is unusable, not the operator
        return None, f"{source}: the policy could not be read ({type(e).__name__})"


def _why(e: BaseException) -> str:
    """What failed, for a status message: the exception's kind, never its text (which
    may quote a ConfigMap or a server's answer)."""
    if isinstance(e, ApiException):
        return f"API error (HTTP {e.status or 'no status'})"
    if isinstance(e, Conflict):
        return f"the HPA kept changing while it was written ({CONFLICT_RETRIES + 1} tries)"
    return f"internal error ({type(e).__name__})"


def _forecast(rt: Runtime, p: Policy, configmaps: ConfigMapLookup | None) -> ForecastState:
    try:
        return _read_forecast(rt, p, configmaps)
    except Exception as e:  # unreadable is missing: decide falls back to the baseline
        ref = p.spec.forecast.config_map_ref
        where = f"ConfigMap {p.namespace}/{ref.name}" if ref else "the forecast URL"
        reason = FORECAST_MISSING if isinstance(e, ApiException) else FORECAST_INVALID
        log.warning("%s/%s: reading %s failed: %r", p.namespace, p.name, where, e)
        return ForecastState(reason=reason, message=f"{where}: {_why(e)}")


def _read_forecast(rt: Runtime, p: Policy,
                   configmaps: ConfigMapLookup | None) -> ForecastState:  # fmt: skip
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
    if hpa is None and target:
        hpa = rt.caches.hpa(ns, target)  # the watch's copy; None before it is bound
    if hpa is None:
        hpa = (read_hpa(rt.api, ns, target, timeout=rt.settings.api_timeout_seconds)
               if target else HpaState(exists=False))  # fmt: skip
    needs = pol is not None and not deleting and conflict is None and hpa.exists
    if forecast is None:
        forecast = _forecast(rt, pol, configmaps) if needs and pol else ForecastState()
    per_replica, per_replica_error = _capacity(rt, ns, pol, hpa) if needs else (None, None)
    lead = None
    if needs and pol is not None:
        pol, lead = leadtime.resolve(rt.lead, (ns, name), pol, hpa.scale_target,
                                     lambda n, t: read_pod_times(
                                         rt.api, n, t, timeout=rt.settings.api_timeout_seconds),
                                     now=time.monotonic())  # fmt: skip
    now = pd.Timestamp.now(tz="UTC").floor("s")
    load = query_load(rt.settings, rt.query, (ns, name), pol if needs else None, now=now,
                      clock=time.monotonic())  # fmt: skip
    return Observed(
        name=name, namespace=ns, policy=pol, hpa=hpa, forecast=forecast, now=now,
        status=rt.written.get((ns, name)) or plain(body.get("status") or {}),
        generation=meta.get("generation"), policy_error=err,
        operator_dry_run=rt.settings.dry_run, conflict_with=conflict, deleting=deleting,
        per_replica=per_replica, per_replica_error=per_replica_error,
        live=rt.live.get((ns, name)), guard=rt.guard.get((ns, name)), lead=lead,
        query_load=load,
    )  # fmt: skip


def _capacity(rt: Runtime, ns: str, pol: Policy | None,
              hpa: HpaState) -> tuple[float | None, str | None]:  # fmt: skip
    """capacity.fromHPA: read the scale target (read-only) and derive cores per replica."""
    if pol is None or not pol.spec.capacity.from_hpa or not hpa.exists:
        return None, None
    try:
        return _read_capacity(rt, ns, hpa)
    except Exception as e:
        log.warning("%s/%s: reading the scale target failed: %r", ns, pol.name, e)
        return None, f"the HPA's scale target could not be read: {_why(e)}"


def _read_capacity(rt: Runtime, ns: str, hpa: HpaState) -> tuple[float | None, str | None]:
    if hpa.cpu_target_utilization is None or hpa.scale_target is None:
        return per_replica_from_hpa(hpa, None)
    spec, why = read_pod_spec(rt.api, ns, hpa.scale_target,
                              timeout=rt.settings.api_timeout_seconds)  # fmt: skip
    return (None, why) if why else per_replica_from_hpa(hpa, spec)


def reconcile(rt: Runtime, body: Mapping[str, Any], *, deleting: bool = False,
              configmaps: ConfigMapLookup | None = None,
              targets: TargetLookup | None = None, gone: bool = False) -> Decision:  # fmt: skip
    """Reconcile one policy. Raises only when the HPA could not be made safe (restored
    or confirmed not ours): the caller retries later. Otherwise a failure has already
    been turned into a restored baseline and a ``ReconcileFailed`` status.

    ``deleting``: the policy is being deleted; once the baseline is back our finalizer
    is released. ``gone``: it has already left the API (deleted without our finalizer,
    or with it removed by hand); the restore still runs, from the HPA's annotations."""
    meta = body.get("metadata", {})
    ns, name = meta["namespace"], meta["name"]
    started = time.monotonic()
    try:
        with rt.lock(ns, name):
            try:
                d = _reconcile_locked(rt, body, deleting, configmaps, targets)
            except Exception as e:
                log.warning("%s/%s: reconcile failed: %r; falling back to the baseline",
                            ns, name, e)  # fmt: skip
                d = _recover(rt, body, deleting, e)
                if d is None:
                    raise
                metrics.ERRORS.labels(type(e).__name__).inc()
        log.info("%s", d.log)
        if deleting and not gone:
            set_finalizer(rt.api, ns, name, present=False,
                          timeout=rt.settings.api_timeout_seconds)  # fmt: skip
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


def _reconcile_locked(rt: Runtime, body: Mapping[str, Any], deleting: bool,
                      configmaps: ConfigMapLookup | None,
                      targets: TargetLookup | None) -> Decision:  # fmt: skip
    meta = body.get("metadata", {})
    ns, name = meta["namespace"], meta["name"]
    forecast = None
    hpa = None
    for attempt in range(CONFLICT_RETRIES + 1):
        obs = observe(rt, body, deleting=deleting, configmaps=configmaps,
                      targets=targets, forecast=forecast, hpa=hpa)  # fmt: skip
        forecast = obs.forecast  # a retry after 409 re-reads the HPA only
        d = decide_safely(obs)
        if d.hpa_patch is None:
            break
        try:
            if not deleting and d.hpa_patch.annotations.get(ANN_POLICY):
                _hold_finalizer(rt, body)  # before the first raise: delete must restore
            _patch(rt, ns, name, _target(body), d)
        except Conflict:
            metrics.ERRORS.labels("Conflict").inc()
            if attempt == CONFLICT_RETRIES:
                raise
            # The watch's copy may lag behind the write that beat us: read it.
            hpa = read_hpa(rt.api, ns, _target(body), timeout=rt.settings.api_timeout_seconds)
            continue
        break
    _report(rt, ns, name, meta.get("uid"), d, obs.status)
    rt.wake_in[(ns, name)] = next_wake(obs, d, rt.periods)
    # The decision that was carried out moves the live correction's EWMA on (a 409
    # retry re-decided from the old memory, so no observation counts twice).
    if d.live_memory is None:
        rt.live.pop((ns, name), None)
    else:
        rt.live[(ns, name)] = d.live_memory
    if d.guard_memory is None:
        rt.guard.pop((ns, name), None)
    else:
        rt.guard[(ns, name)] = d.guard_memory
    return d


def _hold_finalizer(rt: Runtime, body: Mapping[str, Any]) -> None:
    """Our finalizer on the policy, so a delete waits until the baseline is back.
    Added only before a floor is first raised: a policy that never raised one has
    nothing to restore and is never stuck on a missing operator."""
    meta = body.get("metadata", {})
    key = (meta["namespace"], meta["name"])
    if key in rt.finalized or FINALIZER in (meta.get("finalizers") or ()):
        rt.finalized.add(key)
        return
    set_finalizer(rt.api, key[0], key[1], present=True, timeout=rt.settings.api_timeout_seconds)
    rt.finalized.add(key)


def _target(body: Mapping[str, Any]) -> str:
    """The HPA's name, from the body itself: a policy that no longer parses still names
    the HPA it raised (targetRef is immutable)."""
    spec = body.get("spec")
    ref = spec.get("targetRef") if isinstance(spec, Mapping) else None
    name = ref.get("name") if isinstance(ref, Mapping) else None
    if not isinstance(name, str) or not name:
        raise ValueError("policy names no targetRef.name")
    return name


def _patch(rt: Runtime, ns: str, name: str, target: str, d: Decision) -> None:
    assert d.hpa_patch is not None
    patch_hpa(rt.api, ns, target, d.hpa_patch, timeout=rt.settings.api_timeout_seconds)
    metrics.PATCHES.labels(ns, name).inc()
    if os.environ.get(FAULT_ENV):
        log.warning("%s set: killing the operator after the HPA patch", FAULT_ENV)
        os.kill(os.getpid(), signal.SIGKILL)


def _report(rt: Runtime, ns: str, name: str, uid: str | None, d: Decision,
            current: Mapping[str, Any]) -> None:  # fmt: skip
    """Events (best effort), then the status if it changed."""
    timeout = rt.settings.api_timeout_seconds
    for ev in d.events:
        try:
            policies.post_event(rt.api, ns, name, uid, ev, timeout=timeout)
        except ApiException as e:  # an Event is best effort; the status says it all
            log.warning("%s/%s: could not post Event %s: %s", ns, name, ev.reason, e)
    if d.status is not None and d.status_changed:
        policies.write_status(rt.api, ns, name, d.status, current, timeout=timeout)
        rt.written[(ns, name)] = d.status


def _recover(rt: Runtime, body: Mapping[str, Any], deleting: bool,
             error: Exception) -> Decision | None:
    """After a failed reconcile: restore the baseline from a fresh read of the HPA and
    record why. Returns the decision carried out once the HPA is safe (restored, not
    ours, or gone), else None. The status write is best effort: the HPA comes first."""
    meta = body.get("metadata", {})
    ns, name = meta["namespace"], meta["name"]
    try:
        try:
            target: str | None = _target(body)
        except ValueError:
            target = None
        hpa = (read_hpa(rt.api, ns, target, timeout=rt.settings.api_timeout_seconds)
               if target else HpaState(exists=False))  # fmt: skip
        obs = Observed(name=name, namespace=ns, policy=None, hpa=hpa,
                       forecast=ForecastState(), now=pd.Timestamp.now(tz="UTC").floor("s"),
                       status=rt.written.get((ns, name)) or plain(body.get("status") or {}),
                       generation=meta.get("generation"), deleting=deleting)  # fmt: skip
        d = fail_safe(obs, _why(error))
        if d.hpa_patch is not None and target is not None:
            _patch(rt, ns, name, target, d)
    except Exception as e:
        log.error("%s/%s: fail-safe restore failed too: %r", ns, name, e)
        return None
    try:
        _report(rt, ns, name, meta.get("uid"), d, obs.status)
    except Exception as e:
        log.warning("%s/%s: could not record the failure in status: %r", ns, name, e)
    return d
