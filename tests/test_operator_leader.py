"""Lease leader election (controller/leader.py) against an in-memory Lease store.

The store enforces what the API server does for a replace: the resourceVersion sent
must be the current one, else 409 (Kubernetes documentation, "API Concepts", section
"Resource versions" / optimistic concurrency). Timings are client-go's defaults
(15 s lease, 10 s renew deadline, 2 s retry), from memory.
"""

from __future__ import annotations

from types import SimpleNamespace
from typing import Any

import pytest
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from floorcast.controller.leader import Elector, LeaseConfig


class Store:
    def __init__(self) -> None:
        self.lease: k8s.V1Lease | None = None
        self.rv = 0
        self.down = False

    def _check(self) -> None:
        if self.down:
            raise ApiException(status=503, reason="Service Unavailable")

    def read_namespaced_lease(self, name: str, ns: str, **_: Any) -> k8s.V1Lease:
        self._check()
        if self.lease is None:
            raise ApiException(status=404, reason="Not Found")
        return self.lease

    def _put(self, body: dict[str, Any]) -> None:
        self.rv += 1
        s = body["spec"]
        self.lease = k8s.V1Lease(
            metadata=k8s.V1ObjectMeta(name=body["metadata"]["name"], resource_version=str(self.rv)),
            spec=k8s.V1LeaseSpec(holder_identity=s.get("holderIdentity"),
                                 lease_duration_seconds=s.get("leaseDurationSeconds"),
                                 renew_time=s.get("renewTime"),
                                 lease_transitions=s.get("leaseTransitions")),
        )  # fmt: skip

    def create_namespaced_lease(self, ns: str, body: dict[str, Any], **_: Any) -> None:
        self._check()
        if self.lease is not None:
            raise ApiException(status=409, reason="AlreadyExists")
        self._put(body)

    def replace_namespaced_lease(self, name: str, ns: str, body: dict[str, Any], **_: Any) -> None:
        self._check()
        assert self.lease is not None
        if body["metadata"]["resourceVersion"] != self.lease.metadata.resource_version:
            raise ApiException(status=409, reason="Conflict")
        self._put(body)


class Clock:
    def __init__(self) -> None:
        self.t = 1000.0

    def __call__(self) -> float:
        return self.t


def elector(store: Store, clock: Clock, who: str) -> Elector:
    e = Elector(api=SimpleNamespace(), cfg=LeaseConfig("fc", "ops", who), clock=clock)
    object.__setattr__(e, "_coord_store", store)
    return e


@pytest.fixture(autouse=True)
def _fake_api(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(Elector, "_coord", property(lambda self: self._coord_store))


def test_first_candidate_creates_the_lease_and_the_second_waits() -> None:
    store, clock = Store(), Clock()
    a, b = elector(store, clock, "a"), elector(store, clock, "b")
    assert a.step() is True
    assert store.lease.spec.holder_identity == "a"
    assert b.step() is False and b.holder == "a"
    clock.t += 2
    assert a.step() is True  # renews
    clock.t += 2
    assert b.step() is False  # the record changed: not expired


def test_standby_takes_over_only_after_a_full_lease_duration_without_renewal() -> None:
    store, clock = Store(), Clock()
    a, b = elector(store, clock, "a"), elector(store, clock, "b")
    a.step()
    assert b.step() is False
    clock.t += 14.9  # a is gone; 15 s (leaseDurationSeconds) have not passed yet
    assert b.step() is False
    clock.t += 0.2
    assert b.step() is True
    assert store.lease.spec.holder_identity == "b"
    assert store.lease.spec.lease_transitions == 1


def test_the_holder_gives_up_before_anyone_else_may_take_over() -> None:
    store, clock = Store(), Clock()
    a = elector(store, clock, "a")
    assert a.step() and not a.lost()
    store.down = True
    clock.t += 9.9
    assert a.step() is False and not a.lost()
    clock.t += 0.2  # past the 10 s renew deadline, still short of the 15 s lease
    assert a.lost()


def test_two_candidates_racing_on_one_expired_lease_one_wins() -> None:
    store, clock = Store(), Clock()
    old = elector(store, clock, "old")
    old.step()
    a, b = elector(store, clock, "a"), elector(store, clock, "b")
    a.step(), b.step()
    clock.t += 16
    lease_a = store.read_namespaced_lease("fc", "ops")
    # b writes between a's read and a's replace: a's replace must get a 409.
    a._coord_store = SimpleNamespace(
        read_namespaced_lease=lambda *_, **__: lease_a,
        replace_namespaced_lease=lambda *a_, **k: (b.step(), store.replace_namespaced_lease(
            *a_, **k))[1],
    )  # fmt: skip
    assert a.step() is False
    assert store.lease.spec.holder_identity == "b"


def test_release_lets_a_standby_take_over_at_once() -> None:
    store, clock = Store(), Clock()
    a, b = elector(store, clock, "a"), elector(store, clock, "b")
    a.step()
    assert b.step() is False
    a.release()
    assert store.lease.spec.holder_identity is None
    assert b.step() is True  # no waiting for the lease duration


def test_release_by_a_non_holder_changes_nothing() -> None:
    store, clock = Store(), Clock()
    a, b = elector(store, clock, "a"), elector(store, clock, "b")
    a.step()
    rv = store.lease.metadata.resource_version
    b.release()
    assert store.lease.metadata.resource_version == rv
