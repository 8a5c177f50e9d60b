"""Several operator replicas (``floorcast run --leader-elect``): only the Lease holder
acts, and a standby takes over within a bounded time when the holder dies.

Both replicas are real `floorcast run` processes with the ServiceAccount token bound to
the project's RBAC: operator-rbac.yaml plus leader-election-rbac.yaml. The bound is
the Lease protocol's: a SIGKILLed holder's Lease is free once its record has not changed
for leaseDurationSeconds (15 s, client-go's default, from memory), and the standby
checks every 2 s; 30 s leaves room for a loaded 2-core machine.

Floors as in test_operator.py (docs/policy.md's floor rule): load 1.5 at perReplica 1 needs
the baseline 2; a peak of 6.5 within leadTime needs ceil(6.5) = 7.
"""

from __future__ import annotations

import os
import signal
import socket
import time
import urllib.request
from pathlib import Path

import pytest
import yaml
from kubernetes import client as k8s
from prometheus_client.parser import text_string_to_metric_families

from e2e.chart_env import Helm, by_kind, docs
from e2e.chart_env import helm as helm  # the fixture
from e2e.operator_env import (
    BASELINE,
    ROOT,
    Env,
    forecast_json,
    min_replicas,
    policy_body,
)

LEASE_RBAC = ROOT / "charts" / "floorcast" / "files" / "leader-election-rbac.yaml"
TAKEOVER_BOUND = 30.0


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def metric(port: int, name: str) -> float:
    """Sum of a family's samples, parsed with prometheus_client's own text parser."""
    with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=5) as r:
        text = r.read().decode()
    return sum(s.value for f in text_string_to_metric_families(text) for s in f.samples
               if s.name == name)  # fmt: skip


def log_of(env: Env, i: int) -> str:
    return (env.log_dir / f"operator-{i}.log").read_text()


def holder(env: Env) -> str | None:
    lease = k8s.CoordinationV1Api(env.api).read_namespaced_lease("fc", env.namespace)
    return lease.spec.holder_identity


def allow_leases(env: Env, control_plane) -> None:
    """Bind leader-election-rbac.yaml to the operator's ServiceAccount, as the chart does."""
    control_plane.kubectl("apply", "-f", str(LEASE_RBAC))
    k8s.RbacAuthorizationV1Api(env.api).create_namespaced_role_binding(env.namespace, {
        "metadata": {"name": "floorcast-leader-election"},
        "roleRef": {"apiGroup": "rbac.authorization.k8s.io", "kind": "ClusterRole",
                    "name": "floorcast-leader-election"},
        "subjects": [{"kind": "ServiceAccount", "name": "floorcast-operator",
                      "namespace": env.namespace}],
    })  # fmt: skip


@pytest.mark.e2e
def test_only_the_lease_holder_acts_and_a_standby_takes_over(env: Env, control_plane) -> None:
    allow_leases(env, control_plane)
    env.create_workload()
    env.put_forecast(forecast_json(peak=6.5, peak_in="10m"))
    ports = [free_port(), free_port()]
    a = env.start_operator("--leader-elect", "fc", "--identity", "a", "--metrics-port",
                           str(ports[0]))  # fmt: skip
    env.wait(lambda: "leader election: acting" in log_of(env, 0), "a leads", timeout=30)
    env.start_operator("--leader-elect", "fc", "--identity", "b", "--metrics-port",
                       str(ports[1]))  # fmt: skip
    env.wait(lambda: "standby: Lease" in log_of(env, 1) and "'a'" in log_of(env, 1),
             "b on standby", timeout=30)  # fmt: skip
    assert holder(env) == "a"

    env.create_policy(policy_body("p"))
    env.wait(min_replicas(env, 7), "the leader raises minReplicas to 7")
    env.wait(lambda: metric(ports[0], "floorcast_hpa_patches_total") >= 1, "a counts its patch")
    time.sleep(5)  # a few 2 s timer ticks: a standby that acted would show it by now
    assert metric(ports[1], "floorcast_hpa_patches_total") == 0
    assert metric(ports[0], "floorcast_leader") == 1 and metric(ports[1], "floorcast_leader") == 0
    assert f"{env.namespace}/p:" not in log_of(env, 1)  # b never reconciled the policy

    os.killpg(a.pid, signal.SIGKILL)  # no release: b must wait out the lease
    a.wait(10)
    killed = time.monotonic()
    env.wait(lambda: "leader election: acting" in log_of(env, 1), "b takes over",
             timeout=TAKEOVER_BOUND + 5)  # fmt: skip
    took = time.monotonic() - killed
    assert took <= TAKEOVER_BOUND, took
    assert holder(env) == "b"
    env.put_forecast(forecast_json(peak=1.5))  # no peak any more: back to the baseline
    env.wait(min_replicas(env, BASELINE), "the new leader acts: minReplicas back to 2")
    assert metric(ports[1], "floorcast_hpa_patches_total") >= 1
    assert metric(ports[1], "floorcast_leader") == 1


@pytest.mark.e2e
def test_a_clean_shutdown_releases_the_lease_quickly(env: Env, control_plane) -> None:
    allow_leases(env, control_plane)
    a = env.start_operator("--leader-elect", "fc", "--identity", "a")
    env.wait(lambda: "leader election: acting" in log_of(env, 0), "a leads", timeout=30)
    env.start_operator("--leader-elect", "fc", "--identity", "b")
    env.wait(lambda: "standby: Lease" in log_of(env, 1), "b on standby", timeout=30)
    os.killpg(a.pid, signal.SIGTERM)
    a.wait(15)
    assert "released Lease" in log_of(env, 0)
    stopped = time.monotonic()
    env.wait(lambda: "leader election: acting" in log_of(env, 1), "b takes over", timeout=15)
    # Released: one 2 s retry period (plus load), well under the 15 s lease duration.
    assert time.monotonic() - stopped < 10


def test_chart_allows_several_replicas_only_with_leader_election(helm: Helm) -> None:
    out = helm.template({"replicas": 3, "leaderElection": {"enabled": True}})
    (dep,) = by_kind(out, "Deployment")
    assert dep["spec"]["replicas"] == 3 and "strategy" not in dep["spec"]
    args = dep["spec"]["template"]["spec"]["containers"][0]["args"]
    assert "--leader-elect=floorcast" in args and "--leader-elect-namespace=floorcast" in args
    roles = [r for r in by_kind(out, "Role") if r["metadata"]["name"].endswith("leader-election")]
    want = yaml.safe_load(Path(LEASE_RBAC).read_text())["rules"]
    assert [r["metadata"]["namespace"] for r in roles] == ["floorcast"]
    assert roles[0]["rules"] == want
    (rb,) = [b for b in by_kind(out, "RoleBinding") if b["roleRef"]["kind"] == "Role"]
    assert rb["roleRef"]["name"] == roles[0]["metadata"]["name"]
    # Nothing cluster-wide about Leases: the ClusterRole is operator-rbac.yaml's alone.
    (cr,) = by_kind(out, "ClusterRole")
    assert all("leases" not in r["resources"] for r in cr["rules"])
    single = helm.template({"leaderElection": {"enabled": True}})
    assert by_kind(single, "Deployment")[0]["spec"]["replicas"] == 1
    assert {d["kind"] for d in docs(helm.template())} >= {"Deployment"}
    res = helm.run("template", "x", str(ROOT / "charts" / "floorcast"), "-f",
                   str(helm.values_file({"replicas": 2,
                                         "leaderElection": {"enabled": False}})),
                   check=False)  # fmt: skip
    assert res.returncode != 0 and "replicas" in res.stderr
