"""capacity.fromHPA: per-replica cores = sum of CPU requests × HPA averageUtilization / 100.

Quantity values from the Kubernetes docs, "Resource Management for Pods and Containers"
> "CPU resource units": "0.1 is equivalent to the expression 100m", 1 CPU unit = 1 core.
The formula follows "Horizontal Pod Autoscaling" > "Algorithm details" (utilization is
measured against the containers' requests).
"""

from __future__ import annotations

import pytest
from kubernetes import client as k8s
from test_reconcile import MANAGED, hpa, observed, policy

from floorcast.controller.capacity import cpu_cores, per_replica_from_hpa, requested_cpu
from floorcast.controller.decide import decide
from floorcast.controller.state import HpaState
from floorcast.kube.hpa import hpa_from_body

TARGET = ("apps/v1", "Deployment", "web")


@pytest.mark.parametrize(("text", "cores"), [
    ("100m", 0.1), ("0.1", 0.1), ("500m", 0.5), ("2", 2.0), ("1.5", 1.5), ("250000u", 0.25),
    ("1e3", 1000.0), ("1k", 1000.0), ("1Ki", 1024.0),
])  # fmt: skip
def test_cpu_quantities(text: str, cores: float) -> None:
    assert cpu_cores(text) == pytest.approx(cores)


@pytest.mark.parametrize("bad", ["", "abc", "1.5 cores", "m", "1mi"])
def test_bad_quantity_is_refused(bad: str) -> None:
    with pytest.raises(ValueError, match="not a Kubernetes quantity"):
        cpu_cores(bad)


def pod(*requests: str | None) -> dict:
    return {"containers": [
        {"name": f"c{i}", **({"resources": {"requests": {"cpu": r}}} if r else {})}
        for i, r in enumerate(requests)
    ]}  # fmt: skip


def test_requests_are_summed_over_containers() -> None:
    assert requested_cpu(pod("250m", "0.5")) == (pytest.approx(0.75), None)
    cores, why = requested_cpu(pod("250m", None))
    assert cores is None and why == "container 'c1' has no CPU request"
    assert requested_cpu({"containers": []})[1] == "the pod template has no containers"


def with_cpu(target: int | None) -> HpaState:
    return HpaState(True, 2, 10, {}, "41", cpu_target_utilization=target, scale_target=TARGET)


def test_per_replica_is_requests_times_target() -> None:
    # 0.75 cores requested, HPA holds 60 % utilization: 0.45 cores of load per replica.
    assert per_replica_from_hpa(with_cpu(60), pod("250m", "500m")) == (pytest.approx(0.45), None)


@pytest.mark.parametrize(("h", "spec", "says"), [
    (with_cpu(None), pod("1"), "no CPU metric with target type Utilization"),
    (with_cpu(50), None, "scale target Deployment web was not found"),
    (with_cpu(50), pod(None), "Deployment web: container 'c0' has no CPU request"),
])  # fmt: skip
def test_why_capacity_cannot_be_computed(h: HpaState, spec, says: str) -> None:
    value, why = per_replica_from_hpa(h, spec)
    assert value is None and says in why


def test_cpu_target_is_read_from_the_v2_hpa() -> None:
    def hpa_with(*metrics: k8s.V2MetricSpec) -> k8s.V2HorizontalPodAutoscaler:
        ref = k8s.V2CrossVersionObjectReference(api_version="apps/v1", kind="Deployment",
                                                name="web")  # fmt: skip
        return k8s.V2HorizontalPodAutoscaler(spec=k8s.V2HorizontalPodAutoscalerSpec(
            max_replicas=10, scale_target_ref=ref, metrics=list(metrics)))  # fmt: skip

    def res(name: str, type_: str, **target: int) -> k8s.V2MetricSpec:
        return k8s.V2MetricSpec(type="Resource", resource=k8s.V2ResourceMetricSource(
            name=name, target=k8s.V2MetricTarget(type=type_, **target)))  # fmt: skip

    def _cpu_target(obj: k8s.V2HorizontalPodAutoscaler) -> int | None:
        return hpa_from_body(k8s.ApiClient().sanitize_for_serialization(obj)).cpu_target_utilization

    assert (
        _cpu_target(
            hpa_with(
                res("memory", "Utilization", average_utilization=70),
                res("cpu", "Utilization", average_utilization=55),
            )
        )
        == 55
    )
    assert _cpu_target(hpa_with(res("cpu", "AverageValue", average_value="500m"))) is None
    assert _cpu_target(hpa_with()) is None


def test_decide_uses_the_derived_capacity() -> None:
    # perReplica 0.5: load 1.5 needs ceil(1.5 / 0.5) = 3 and the 6.5 peak 13, clamped to
    # the HPA's maxReplicas 10 (floor rule, docs/policy.md).
    d = decide(observed(policy(capacity={"fromHPA": True}), per_replica=0.5))
    assert d.hpa_patch is not None and d.hpa_patch.min_replicas == 10


def test_capacity_unknown_restores_the_baseline_with_its_reason() -> None:
    why = "capacity.fromHPA: Deployment web: container 'app' has no CPU request"
    d = decide(observed(policy(capacity={"fromHPA": True}), h=hpa(7, **MANAGED),
                        per_replica_error=why))  # fmt: skip
    assert d.hpa_patch is not None and d.hpa_patch.min_replicas == 2
    ready = next(c for c in d.status["conditions"] if c["type"] == "Ready")
    assert (ready["status"], ready["reason"], ready["message"]) == ("False", "CapacityUnknown",
                                                                   why)  # fmt: skip
