"""What the living-cluster scenarios share: a namespace on the living control plane
bound to the operator's RBAC, Deployments whose Pods request CPU, HPAs that scale on
real metrics, and a recorder of what the cluster did.
"""

from __future__ import annotations

import contextlib
import json
import secrets
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from kubernetes import client as k8s

from e2e.controlplane.runner import ControlPlane
from e2e.controlplane.tokens import bind_cluster_role, service_account_credentials
from e2e.load import Trace, is_ready
from e2e.operator_env import CRD, RBAC, Env

#: Each Pod requests one core, so per-replica capacity at the HPA target is the target.
POD_CPU = 1.0
HPA_TARGET = 70  # averageUtilization, percent
HPA_MIN, HPA_MAX = 2, 24
#: A short scale-down window so "after the peak" fits in a test (default: 300 s).
SCALE_DOWN_WINDOW = 30


@contextlib.contextmanager
def living_env(cp: ControlPlane, tmp: Path, api: k8s.ApiClient) -> Iterator[Env]:
    """A fresh namespace with the operator's ClusterRole bound to a ServiceAccount."""
    cp.kubectl("apply", "-f", str(CRD), "-f", str(RBAC))
    cp.kubectl("wait", "--for=condition=Established", "--timeout=60s",
               "crd/forecastscalingpolicies.floorcast.dev")  # fmt: skip
    core = k8s.CoreV1Api(api)
    ns = f"e2e-living-{secrets.token_hex(3)}"
    core.create_namespace({"metadata": {"name": ns}})
    deadline = time.monotonic() + 30
    while True:
        try:
            core.read_namespaced_service_account("default", ns)
            break
        except k8s.ApiException:
            if time.monotonic() > deadline:
                raise
            time.sleep(0.5)
    creds = service_account_credentials(cp, ns, "floorcast-operator", tmp, create=True)
    bind_cluster_role(api, ns, creds.name)
    env = Env(api, ns, creds.kubeconfig, tmp, [])
    try:
        yield env
    finally:
        env.stop_all()
        env.release_policies()
        core.delete_namespace(ns)


def create_service(env: Env, name: str, *, replicas: int = HPA_MIN,
                   pod_annotations: dict[str, str] | None = None) -> None:  # fmt: skip
    """A Deployment of 1-core Pods and an HPA on CPU at :data:`HPA_TARGET`."""
    labels = {"app": name}
    template_meta: dict[str, Any] = {"labels": labels}
    if pod_annotations:
        template_meta["annotations"] = pod_annotations
    container = {"name": "app", "image": "registry.k8s.io/pause:3.10",
                 "resources": {"requests": {"cpu": str(POD_CPU), "memory": "64Mi"}}}  # fmt: skip
    k8s.AppsV1Api(env.api).create_namespaced_deployment(env.namespace, {
        "apiVersion": "apps/v1", "kind": "Deployment", "metadata": {"name": name},
        "spec": {"replicas": replicas, "selector": {"matchLabels": labels},
                 "template": {"metadata": template_meta,
                              "spec": {"containers": [container],
                                       "terminationGracePeriodSeconds": 0}}},
    })  # fmt: skip
    env.hpas.create_namespaced_horizontal_pod_autoscaler(env.namespace, {
        "apiVersion": "autoscaling/v2", "kind": "HorizontalPodAutoscaler",
        "metadata": {"name": name},
        "spec": {"scaleTargetRef": {"apiVersion": "apps/v1", "kind": "Deployment", "name": name},
                 "minReplicas": HPA_MIN, "maxReplicas": HPA_MAX,
                 "metrics": [{"type": "Resource", "resource": {"name": "cpu", "target": {
                     "type": "Utilization", "averageUtilization": HPA_TARGET}}}],
                 "behavior": {"scaleDown": {"stabilizationWindowSeconds": SCALE_DOWN_WINDOW}}},
    })  # fmt: skip


def ready_pods(env: Env, name: str) -> int:
    pods = k8s.CoreV1Api(env.api).list_namespaced_pod(env.namespace, label_selector=f"app={name}")
    return sum(1 for p in pods.items if p.metadata.deletion_timestamp is None and is_ready(p))


def forecast_for(trace: Trace, origin: float, *, before: float = 600, hours: float = 2) -> str:
    """A 1-minute forecast of ``trace`` (mean load of each minute) pinned to ``origin``."""
    start = int(origin - before) // 60 * 60
    points = []
    for i in range(int(hours * 60)):
        t0 = start + 60 * i
        mean = sum(trace(t0 - origin + s) for s in range(0, 60, 5)) / 12
        stamp = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(t0))
        points.append({"t": stamp, "value": round(mean, 4)})
    gen = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(origin - before))
    return json.dumps({"unit": "cores", "step": "1m", "generated": gen, "points": points})


@dataclass(frozen=True)
class Snapshot:
    """What one service looked like at one instant."""

    t: float  # seconds since the trace origin
    min_replicas: int
    desired: int | None  # HPA status.desiredReplicas
    current: int | None  # HPA status.currentReplicas
    utilization: int | None  # HPA's current average CPU utilization, percent
    ready: int
    annotations: dict[str, str]


@dataclass
class Recorder:
    """Snapshots of several services every ``period`` seconds, in a thread."""

    env: Env
    names: tuple[str, ...]
    origin: float
    period: float = 3.0
    record: dict[str, list[Snapshot]] = field(default_factory=dict)
    errors: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        self.record = {n: [] for n in self.names}
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="recorder", daemon=True)

    def __enter__(self) -> Recorder:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join(timeout=30)

    def _run(self) -> None:
        while not self._stop.is_set():
            for n in self.names:
                try:
                    self.record[n].append(self.snapshot(n))
                except Exception as exc:  # keep recording; tests look at .errors
                    self.errors.append(repr(exc))
            self._stop.wait(self.period)

    def snapshot(self, name: str) -> Snapshot:
        h = self.env.hpa(name)
        util = None
        for m in (h.status.current_metrics or []) if h.status else []:
            if m.resource and m.resource.current:
                util = m.resource.current.average_utilization
        return Snapshot(
            t=time.time() - self.origin,
            min_replicas=h.spec.min_replicas,
            desired=h.status.desired_replicas if h.status else None,
            current=h.status.current_replicas if h.status else None,
            utilization=util,
            ready=ready_pods(self.env, name),
            annotations=dict(h.metadata.annotations or {}),
        )

    def between(self, name: str, t0: float, t1: float) -> list[Snapshot]:
        return [s for s in self.record[name] if t0 <= s.t < t1]


def wait_until(probe: Callable[[], Any], timeout: float, what: str) -> Any:
    deadline = time.monotonic() + timeout
    while True:
        got = probe()
        if got:
            return got
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out after {timeout:.0f} s waiting for {what}")
        time.sleep(1)
