"""What the operator e2e tests share: a real `floorcast run` process bound to the
project's RBAC, a Deployment + HPA to act on, and forecasts in labelled ConfigMaps.

The operator runs as a subprocess with a ServiceAccount token kubeconfig whose only
permissions are ``charts/floorcast/files/operator-rbac.yaml`` (bound in the test's
namespace by a RoleBinding), so a missing RBAC rule fails these tests.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from e2e.controlplane.tokens import bind_cluster_role
from e2e.helpers import eventually

ROOT = Path(__file__).resolve().parents[1]
CRD = ROOT / "crds" / "forecastscalingpolicies.floorcast.dev.yaml"
RBAC = ROOT / "charts" / "floorcast" / "files" / "operator-rbac.yaml"
FLOORCAST = Path(sys.executable).parent / "floorcast"
GROUP, VERSION, PLURAL = "floorcast.dev", "v1alpha1", "forecastscalingpolicies"
BASELINE, HPA_MAX = 2, 10


def forecast_json(*, peak: float = 6.5, peak_in: str = "10m", generated: pd.Timestamp | None = None,
                  hours: float = 2) -> str:  # fmt: skip
    """1-minute forecast: load 1.5 (2 replicas at perReplica 1), ``peak`` at now + ``peak_in``."""
    now = pd.Timestamp.now(tz="UTC").floor("min")
    start = now - pd.Timedelta("10m")
    at = now + pd.Timedelta(peak_in)
    points = []
    for i in range(int(hours * 60)):
        t = start + pd.Timedelta(minutes=i)
        value = peak if at <= t < at + pd.Timedelta("3m") else 1.5
        points.append({"t": t.strftime("%Y-%m-%dT%H:%M:%SZ"), "value": value})
    gen = (generated or now).strftime("%Y-%m-%dT%H:%M:%SZ")
    return json.dumps({"unit": "cores", "step": "1m", "generated": gen, "points": points})


def policy_body(name: str, *, mode: str = "Enforce", target: str = "web",
                forecast: dict[str, Any] | None = None) -> dict[str, Any]:  # fmt: skip
    return {
        "apiVersion": f"{GROUP}/{VERSION}",
        "kind": "ForecastScalingPolicy",
        "metadata": {"name": name},
        "spec": {
            "targetRef": {"name": target},
            "forecast": forecast or {"configMapRef": {"name": "web-forecast", "key": "f.json"}},
            "capacity": {"perReplica": 1},
            "leadTime": "15m",
            "holdTime": "1m",
            "headroom": 0,
            "mode": mode,
        },
    }


@dataclass
class Env:
    """One test namespace with a workload, and handles to act on it."""

    api: k8s.ApiClient
    namespace: str
    kubeconfig: Path
    log_dir: Path
    procs: list[subprocess.Popen]

    @property
    def hpas(self) -> k8s.AutoscalingV2Api:
        return k8s.AutoscalingV2Api(self.api)

    @property
    def custom(self) -> k8s.CustomObjectsApi:
        return k8s.CustomObjectsApi(self.api)

    def start_operator(self, *args: str, env: dict[str, str] | None = None) -> subprocess.Popen:
        log = (self.log_dir / f"operator-{len(self.procs)}.log").open("w")
        cmd = [str(FLOORCAST), "run", "--namespace", self.namespace, "--interval", "2s",
               "--metrics-port", "0", "--liveness-port", "0", "--kubeconfig",
               str(self.kubeconfig), *args]  # fmt: skip
        p = subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT, start_new_session=True,
                             env={**os.environ, **(env or {})})  # fmt: skip
        self.procs.append(p)
        return p

    def operator_log(self) -> str:
        return "\n".join(p.read_text()[-4000:] for p in sorted(self.log_dir.glob("operator-*")))

    def release_policies(self) -> None:
        """Strip every policy's finalizer so the namespace can go even if the
        operator that would have removed them is gone."""
        try:
            for p in self.custom.list_namespaced_custom_object(GROUP, VERSION, self.namespace,
                                                               PLURAL)["items"]:  # fmt: skip
                self.custom.patch_namespaced_custom_object(GROUP, VERSION, self.namespace,
                    PLURAL, p["metadata"]["name"], {"metadata": {"finalizers": None}})  # fmt: skip
        except ApiException:
            pass

    def stop_all(self) -> None:
        for p in self.procs:
            if p.poll() is None:
                os.killpg(p.pid, signal.SIGTERM)
        for p in self.procs:
            try:
                p.wait(10)
            except subprocess.TimeoutExpired:
                os.killpg(p.pid, signal.SIGKILL)
                p.wait(5)

    def create_workload(self, name: str = "web") -> None:
        labels = {"app": name}
        container = {"name": "app", "image": "registry.k8s.io/pause:3.10"}
        k8s.AppsV1Api(self.api).create_namespaced_deployment(self.namespace, {
            "apiVersion": "apps/v1", "kind": "Deployment", "metadata": {"name": name},
            "spec": {"replicas": BASELINE, "selector": {"matchLabels": labels},
                     "template": {"metadata": {"labels": labels},
                                  "spec": {"containers": [container]}}},
        })  # fmt: skip
        self.hpas.create_namespaced_horizontal_pod_autoscaler(self.namespace, {
            "apiVersion": "autoscaling/v2", "kind": "HorizontalPodAutoscaler",
            "metadata": {"name": name},
            "spec": {"scaleTargetRef": {"apiVersion": "apps/v1", "kind": "Deployment",
                                        "name": name},
                     "minReplicas": BASELINE, "maxReplicas": HPA_MAX,
                     "metrics": [{"type": "Resource", "resource": {"name": "cpu", "target": {
                         "type": "Utilization", "averageUtilization": 50}}}]},
        })  # fmt: skip

    def put_forecast(self, text: str, name: str = "web-forecast") -> None:
        core = k8s.CoreV1Api(self.api)
        body = {"metadata": {"name": name, "labels": {"floorcast.dev/forecast": "true"}},
                "data": {"f.json": text}}  # fmt: skip
        try:
            core.create_namespaced_config_map(self.namespace, body)
        except ApiException as e:
            if e.status != 409:
                raise
            core.patch_namespaced_config_map(name, self.namespace, body)

    def create_policy(self, body: dict[str, Any]) -> dict[str, Any]:
        return self.custom.create_namespaced_custom_object(GROUP, VERSION, self.namespace,
                                                           PLURAL, body)  # fmt: skip

    def policy(self, name: str) -> dict[str, Any]:
        return self.custom.get_namespaced_custom_object(GROUP, VERSION, self.namespace, PLURAL,
                                                        name)  # fmt: skip

    def hpa(self, name: str = "web") -> k8s.V2HorizontalPodAutoscaler:
        return self.hpas.read_namespaced_horizontal_pod_autoscaler(name, self.namespace)

    def condition(self, name: str, type_: str = "Ready") -> dict[str, Any] | None:
        for c in (self.policy(name).get("status") or {}).get("conditions") or []:
            if c["type"] == type_:
                return c
        return None

    def events(self, reason: str) -> list[Any]:
        items = k8s.CoreV1Api(self.api).list_namespaced_event(self.namespace).items
        return [e for e in items if e.reason == reason and e.source.component == "floorcast"]

    def describe(self) -> str:
        try:
            h = self.hpa()
            hpa = f"HPA min={h.spec.min_replicas} ann={h.metadata.annotations}"
        except Exception as e:  # the HPA may be what is missing
            hpa = f"HPA: {e}"
        pols = self.custom.list_namespaced_custom_object(GROUP, VERSION, self.namespace, PLURAL)
        status = {p["metadata"]["name"]: p.get("status") for p in pols["items"]}
        return f"{hpa}\npolicies: {status}\noperator log:\n{self.operator_log()}"

    def wait(self, probe: Callable[[], Any], what: str, timeout: float = 30) -> Any:
        return eventually(probe, timeout=timeout, what=what, describe=self.describe)


@pytest.fixture(scope="session")
def operator_cluster(control_plane) -> None:
    """CRD and the operator's ClusterRole, installed once for the session."""
    control_plane.kubectl("apply", "-f", str(CRD), "-f", str(RBAC))
    control_plane.kubectl("wait", "--for=condition=Established", "--timeout=60s",
                          f"crd/{PLURAL}.{GROUP}")  # fmt: skip


@pytest.fixture(name="env")
def env_fixture(
    operator_cluster, api_client, namespace, service_account, tmp_path
) -> Iterator[Env]:
    creds = service_account(namespace)
    bind_cluster_role(api_client, namespace, creds.name)
    e = Env(api_client, namespace, creds.kubeconfig, tmp_path, [])
    try:
        yield e
    finally:
        e.stop_all()
        e.release_policies()


def min_replicas(env: Env, want: int) -> Callable[[], bool]:
    return lambda: env.hpa().spec.min_replicas == want


def monotonic() -> float:
    return time.monotonic()
