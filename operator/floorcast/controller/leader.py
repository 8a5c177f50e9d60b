"""Leader election on a coordination.k8s.io/v1 Lease, so several replicas can run and
only one acts.

Why a Lease and not kopf's peering: kopf pauses *every* operator whose priority equals
another's, so identical replicas of one Deployment would all pause; and peering needs
two more CRDs. A Lease needs only get/create/update on one object in one namespace.

The rules follow the usual Lease protocol (Kubernetes documentation, "Leases", section
"Leader election"; field meanings from the Lease v1 API reference):

* a Lease with no holder, or whose record has not changed for ``leaseDurationSeconds``
  *as measured by our own monotonic clock* (so clock skew between nodes does not
  matter), may be taken; every write carries the resourceVersion read, so of two
  candidates only one wins (the other gets a 409);
* the holder renews every ``retry`` seconds; if it has not renewed for
  ``renew_deadline`` (< the lease duration) it stops acting at once — the process
  exits — before any other candidate can consider the Lease expired;
* a clean shutdown releases the Lease (empty holder), so a standby takes over within
  one retry period instead of a whole lease duration.
"""

from __future__ import annotations

import logging
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

log = logging.getLogger("floorcast.operator")


@dataclass(frozen=True)
class LeaseConfig:
    """client-go's defaults (15 s / 10 s / 2 s), from memory."""

    name: str
    namespace: str
    identity: str
    duration_seconds: int = 15
    renew_deadline_seconds: float = 10.0
    retry_seconds: float = 2.0


def _now() -> datetime:
    return datetime.now(UTC)


@dataclass
class Elector:
    """One candidate. ``step()`` is one try to acquire or renew; it never raises on API
    trouble (a failed step is simply not a success)."""

    api: k8s.ApiClient
    cfg: LeaseConfig
    clock: Callable[[], float] = time.monotonic
    #: (holder, renewTime, resourceVersion) last seen, and when we first saw it.
    _seen: tuple[Any, ...] | None = None
    _seen_at: float = 0.0
    holder: str | None = None
    last_renew: float | None = None
    _lock: threading.Lock = field(default_factory=threading.Lock)

    @property
    def _coord(self) -> k8s.CoordinationV1Api:
        return k8s.CoordinationV1Api(self.api)

    def _timeout(self) -> float:
        return max(1.0, min(5.0, self.cfg.renew_deadline_seconds / 2))

    def _spec(self, transitions: int, acquired: datetime | None) -> dict[str, Any]:
        now = _now()
        return {
            "holderIdentity": self.cfg.identity,
            "leaseDurationSeconds": self.cfg.duration_seconds,
            "acquireTime": (acquired or now).isoformat(timespec="microseconds"),
            "renewTime": now.isoformat(timespec="microseconds"),
            "leaseTransitions": transitions,
        }

    def step(self) -> bool:
        with self._lock:
            try:
                ok = self._step()
            except ApiException as e:
                if e.status not in (409, None) and e.status < 500 and e.status != 429:
                    log.warning("leader election: Lease %s/%s: %s %s", self.cfg.namespace,
                                self.cfg.name, e.status, e.reason)  # fmt: skip
                ok = False
            except Exception as e:  # network trouble: not a success, try again later
                log.debug("leader election step failed: %s", e)
                ok = False
            if ok:
                self.last_renew = self.clock()
            return ok

    def _step(self) -> bool:
        c, ns, name = self._coord, self.cfg.namespace, self.cfg.name
        try:
            lease = c.read_namespaced_lease(name, ns, _request_timeout=self._timeout())
        except ApiException as e:
            if e.status != 404:
                raise
            body = {"metadata": {"name": name}, "spec": self._spec(0, None)}
            c.create_namespaced_lease(ns, body, _request_timeout=self._timeout())
            self.holder = self.cfg.identity
            return True
        spec = lease.spec or k8s.V1LeaseSpec()
        record = (spec.holder_identity, spec.renew_time, lease.metadata.resource_version)
        if record != self._seen:
            self._seen, self._seen_at = record, self.clock()
        self.holder = spec.holder_identity or None
        mine = spec.holder_identity == self.cfg.identity
        duration = spec.lease_duration_seconds or self.cfg.duration_seconds
        expired = self.clock() - self._seen_at >= duration
        if not mine and spec.holder_identity and not expired:
            return False
        transitions = (spec.lease_transitions or 0) + (0 if mine else 1)
        body = {
            "metadata": {"name": name, "resourceVersion": lease.metadata.resource_version},
            "spec": self._spec(transitions, spec.acquire_time if mine else None),
        }
        if mine and spec.acquire_time is not None:
            body["spec"]["acquireTime"] = spec.acquire_time.isoformat(timespec="microseconds")
        c.replace_namespaced_lease(name, ns, body, _request_timeout=self._timeout())
        if not mine:
            log.info("leader election: took Lease %s/%s from %r", ns, name,
                     spec.holder_identity)  # fmt: skip
        self.holder = self.cfg.identity
        return True

    def release(self) -> None:
        """Give the Lease up if we hold it (best effort: it expires anyway)."""
        c, ns, name = self._coord, self.cfg.namespace, self.cfg.name
        try:
            lease = c.read_namespaced_lease(name, ns, _request_timeout=self._timeout())
            if (lease.spec.holder_identity or "") != self.cfg.identity:
                return
            body = {"metadata": {"name": name, "resourceVersion": lease.metadata.resource_version},
                    "spec": {"holderIdentity": None, "leaseDurationSeconds": 1,
                             "renewTime": _now().isoformat(timespec="microseconds"),
                             "leaseTransitions": lease.spec.lease_transitions or 0}}  # fmt: skip
            c.replace_namespaced_lease(name, ns, body, _request_timeout=self._timeout())
            log.info("leader election: released Lease %s/%s", ns, name)
        except Exception as e:
            log.warning("leader election: could not release Lease %s/%s: %s", ns, name, e)

    def lost(self) -> bool:
        """True once we have not renewed for the renew deadline: stop acting now."""
        return (self.last_renew is None
                or self.clock() - self.last_renew > self.cfg.renew_deadline_seconds)  # fmt: skip


def wait_for_leadership(e: Elector, on_standby: Callable[[str | None], None]) -> None:
    """Block until we hold the Lease; ``on_standby(holder)`` when the holder changes."""
    told: object = object()
    while not e.step():
        if e.holder != told:
            told = e.holder
            on_standby(e.holder)
        time.sleep(e.cfg.retry_seconds)


def keep_leading(e: Elector, stop: threading.Event, on_lost: Callable[[], None]) -> None:
    """Renew until ``stop``; ``on_lost()`` as soon as the renew deadline passes."""
    while not stop.wait(e.cfg.retry_seconds):
        e.step()
        if e.holder not in (None, e.cfg.identity) or e.lost():
            on_lost()
            return
