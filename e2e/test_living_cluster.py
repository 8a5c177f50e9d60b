"""The living cluster itself: Pods are scheduled, run, become Ready only after the
start-up delay, report the CPU the load driver gives them through metrics.k8s.io,
and the real HPA controller scales on it."""

from __future__ import annotations

import time

import pytest
from kubernetes import client as k8s

from e2e.conftest import LIVING
from e2e.living_env import create_service, living_env, ready_pods, wait_until
from e2e.load import LoadDriver, is_ready


@pytest.fixture(scope="module")
def living(living_plane, tmp_path_factory):
    with living_plane.api_client() as api, \
            living_env(living_plane, tmp_path_factory.mktemp("living"), api) as env:  # fmt: skip
        yield env


def test_pods_become_ready_after_the_start_up_delay(living, living_plane) -> None:
    create_service(living, "probe")
    core = k8s.CoreV1Api(living.api)
    wait_until(lambda: ready_pods(living, "probe") == 2, 120, "2 Ready pods")
    for pod in core.list_namespaced_pod(living.namespace, label_selector="app=probe").items:
        assert pod.spec.node_name.startswith("kwok-node-"), "bound by the real scheduler"
        assert pod.status.phase == "Running"
        ready = next(c for c in pod.status.conditions if c.type == "Ready")
        delay = (ready.last_transition_time - pod.status.start_time).total_seconds()
        # kwok's Stage delay, as configured in conftest.LIVING (second resolution).
        assert LIVING.pod_ready_delay - 1 <= delay <= LIVING.pod_ready_delay + 5, delay


def test_hpa_scales_on_real_pod_metrics(living, living_plane) -> None:
    """3 cores over 2 one-core Pods is 150 % against a 70 % target: the HPA controller,
    reading metrics-server through the aggregation layer, asks for ceil(3 / 0.7) = 5
    ([HPA doc] "Algorithm details": desired = ceil(current × current/target))."""
    name = "probe"
    if ready_pods(living, name) != 2:
        create_service(living, name)
        wait_until(lambda: ready_pods(living, name) == 2, 120, "2 Ready pods")
    with LoadDriver(living.api, living.namespace, f"app={name}", lambda t: 3.0) as drv:
        started = time.monotonic()
        pm = wait_until(lambda: _pod_metrics(living, name, min_millicores=1200), 90,
                        "PodMetrics with the driven usage")  # fmt: skip
        assert all(1300 <= m <= 1700 for m in pm), pm  # 3 cores / 2 Ready pods each
        wait_until(lambda: (living.hpa(name).status.desired_replicas or 0) >= 5, 90,
                   "HPA desiredReplicas >= 5")  # fmt: skip
        h = living.hpa(name)
        active = {c.type: c.status for c in h.status.conditions}
        assert active.get("ScalingActive") == "True", h.status.conditions
        assert h.status.desired_replicas == 5, h.status
        # The new Pods serve only after the start-up delay, then share the load.
        wait_until(lambda: ready_pods(living, name) == 5, 120, "5 Ready pods")
        assert time.monotonic() - started >= LIVING.pod_ready_delay
        assert not drv.errors, drv.errors
    pods = k8s.CoreV1Api(living.api).list_namespaced_pod(living.namespace,
                                                          label_selector=f"app={name}")  # fmt: skip
    assert sum(is_ready(p) for p in pods.items) == 5


def _pod_metrics(env, name: str, *, min_millicores: int) -> list[int] | None:
    got = k8s.CustomObjectsApi(env.api).list_namespaced_custom_object(
        "metrics.k8s.io", "v1beta1", env.namespace, "pods", label_selector=f"app={name}"
    )
    values = []
    for item in got.get("items", []):
        cpu = item["containers"][0]["usage"]["cpu"]
        values.append(_millicores(cpu))
    if len(values) >= 2 and all(v >= min_millicores for v in values):
        return values
    return None


def _millicores(q: str) -> int:
    if q.endswith("n"):
        return int(q[:-1]) // 1_000_000
    if q.endswith("u"):
        return int(q[:-1]) // 1_000
    if q.endswith("m"):
        return int(q[:-1])
    return int(float(q) * 1000)
