"""capacity.fromHPA on the real control plane, through the operator's read-only RBAC.

perReplica = CPU requests × averageUtilization / 100 (Kubernetes docs, "Horizontal Pod
Autoscaling" > "Algorithm details"): one container requesting 1500m under the helper's
50 % CPU target carries 0.75 cores. Flat load 1.5 then needs ceil(1.5 / 0.75) = 2 (the
baseline) and the 6.5 peak ceil(6.5 / 0.75) = ceil(8.67) = 9 (docs/policy.md).
"""

from __future__ import annotations

import pytest
from kubernetes import client as k8s

from e2e.operator_env import (
    BASELINE,
    Env,
    forecast_json,
    min_replicas,
    policy_body,
)

pytestmark = pytest.mark.e2e


def test_from_hpa_derives_capacity_from_requests_and_cpu_target(env: Env) -> None:
    env.create_workload()  # its container has no CPU request yet
    env.put_forecast(forecast_json())
    env.start_operator()
    body = policy_body("p")
    body["spec"]["capacity"] = {"fromHPA": True}
    env.create_policy(body)
    c = env.wait(lambda: (env.condition("p") or {}).get("reason") == "CapacityUnknown"
                 and env.condition("p"), "Ready=False CapacityUnknown")  # fmt: skip
    assert c["status"] == "False" and "container 'app' has no CPU request" in c["message"]
    assert env.hpa().spec.min_replicas == BASELINE

    k8s.AppsV1Api(env.api).patch_namespaced_deployment("web", env.namespace, {
        "spec": {"template": {"spec": {"containers": [
            {"name": "app", "resources": {"requests": {"cpu": "1500m"}}}]}}},
    })  # fmt: skip
    env.wait(min_replicas(env, 9), "floor 9 from 0.75 cores per replica (timer, 2 s)")
    env.wait(lambda: (env.condition("p") or {}).get("status") == "True", "Ready=True")
    assert env.policy("p")["status"]["floor"] == 9
