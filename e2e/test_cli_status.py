"""`floorcast status` against the real API server, as the console script a user runs.

The policy's status is written through the status subresource (no operator runs in
the test's namespace, so it stays as written) and read back by the command, once as
the admin and once as a ServiceAccount whose Role grants only get and list on
policies: the command must work with exactly that, and write nothing.
"""

from __future__ import annotations

import json
import subprocess
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pytest
import yaml
from kubernetes import client as k8s

from e2e.operator_env import CRD, FLOORCAST, GROUP, PLURAL, VERSION, policy_body

pytestmark = pytest.mark.e2e
MERGE_PATCH = "application/merge-patch+json"


def floorcast_status(kubeconfig: Path, *args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([str(FLOORCAST), "status", "--kubeconfig", str(kubeconfig), *args],
                          capture_output=True, text=True, timeout=60)  # fmt: skip


def known_status(now: datetime) -> dict[str, Any]:
    """What the operator writes in Enforce with the accuracy guard on and ``leadTime:
    auto``, with an explanation line."""
    z = "%Y-%m-%dT%H:%M:%SZ"
    return {
        "floor": 7, "baseline": 2,
        "nextChange": {"at": (now + timedelta(minutes=20)).strftime(z), "replicas": 2},
        "forecastGenerated": (now - timedelta(minutes=12)).strftime(z),
        "lastAppliedTime": (now - timedelta(minutes=1)).strftime(z),
        "accuracy": {"error": 0.15, "exceedance": 0.05, "reason": "WithinLimits",
                     "message": "WAPE 0.15 and exceedance 0.05 within limits"},
        "addedReplicaHours": 3.4,
        "explanation": "floor 7: forecast 6.5 cores at the 18:05 peak needs ceil(6.5 / 1) = 7",
        "leadTime": {"value": "1m15s", "source": "Measured", "samples": 4, "podStartup": "45s"},
        "conditions": [
            {"type": "Ready", "status": "True", "reason": "FloorApplied",
             "message": "floor 7 in force", "lastTransitionTime": now.strftime(z)},
            {"type": "ForecastAccurate", "status": "True", "reason": "WithinLimits",
             "message": "within limits", "lastTransitionTime": now.strftime(z)},
        ],
    }  # fmt: skip


def status_schema() -> dict[str, Any]:
    """The status properties of the CRD the session installed (crds/)."""
    crd = yaml.safe_load(CRD.read_text())
    (version,) = [v for v in crd["spec"]["versions"] if v["name"] == VERSION]
    return version["schema"]["openAPIV3Schema"]["properties"]["status"]["properties"]


def read_only_role(api: k8s.ApiClient, namespace: str, account: str) -> None:
    """get and list on policies in ``namespace``, nothing else."""
    rbac = k8s.RbacAuthorizationV1Api(api)
    rbac.create_namespaced_role(namespace, {
        "metadata": {"name": "fsp-reader"},
        "rules": [{"apiGroups": [GROUP], "resources": [PLURAL], "verbs": ["get", "list"]}],
    })  # fmt: skip
    rbac.create_namespaced_role_binding(namespace, {
        "metadata": {"name": "fsp-reader"},
        "roleRef": {"apiGroup": "rbac.authorization.k8s.io", "kind": "Role",
                    "name": "fsp-reader"},
        "subjects": [{"kind": "ServiceAccount", "name": account, "namespace": namespace}],
    })  # fmt: skip


def test_status_shows_the_written_status_to_a_get_list_only_user(
    operator_cluster, control_plane, api_client, namespace, service_account
) -> None:
    custom = k8s.CustomObjectsApi(api_client)
    custom.create_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL,
                                           policy_body("web", mode="Enforce"))  # fmt: skip
    written = datetime.now(UTC).replace(microsecond=0)
    custom.patch_namespaced_custom_object_status(
        GROUP, VERSION, namespace, PLURAL, "web", {"status": known_status(written)},
        _content_type=MERGE_PATCH,
    )  # fmt: skip
    stored = custom.get_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL, "web")
    assert stored["status"]["floor"] == 7  # the status subresource took the write
    rv = stored["metadata"]["resourceVersion"]

    done = floorcast_status(control_plane.kubeconfig, "-n", namespace, "--json")
    assert done.returncode == 0, done.stderr
    (row,) = json.loads(done.stdout)
    st = stored["status"]
    assert (row["namespace"], row["name"], row["target"]) == (namespace, "web", "web")
    assert (row["mode"], row["ready"], row["ready_reason"]) == ("Enforce", "True", "FloorApplied")
    assert (row["floor"], row["baseline"], row["proposed_floor"]) == (7, 2, None)
    assert row["next_change"] == st["nextChange"] and row["next_change"]["replicas"] == 2
    # Generated 12 minutes before ``written``; the command ran a few seconds later.
    assert 12 * 60 <= row["forecast_age_seconds"] <= 12 * 60 + 50
    assert row["accuracy"] == {"status": "True", "reason": "WithinLimits", "error": 0.15,
                               "exceedance": 0.05, "message": st["accuracy"]["message"]}
    assert row["added_replica_hours"] == 3.4
    assert row["last_applied_time"] == st["lastAppliedTime"]
    # The API server prunes status fields its schema does not name: both are named.
    wrote = known_status(written)
    for key, field in (("explanation", "explanation"), ("lead_time", "leadTime")):
        assert field in status_schema() and st[field] == wrote[field], field
        assert row[key] == wrote[field], key

    # The table, as a person reads it.
    done = floorcast_status(control_plane.kubeconfig, "-n", namespace)
    assert done.returncode == 0, done.stderr
    header, line = done.stdout.splitlines()
    assert header.split()[:4] == ["NAMESPACE", "NAME", "MODE", "READY"]
    assert line.split()[:6] == [namespace, "web", "Enforce", "True", "FloorApplied", "7"]
    assert "ok (WAPE 0.15)" in line and " 12m " in line and "3.4" in line

    # A ServiceAccount that may only get and list policies, in this namespace: its
    # kubeconfig's context namespace is the test's, so no -n is needed.
    creds = service_account(namespace, "status-reader")
    read_only_role(api_client, namespace, creds.name)
    done = floorcast_status(creds.kubeconfig, "--json")
    assert done.returncode == 0, done.stderr
    (mine,) = json.loads(done.stdout)
    assert {k: v for k, v in mine.items() if k != "forecast_age_seconds"} == {
        k: v for k, v in row.items() if k != "forecast_age_seconds"}
    done = floorcast_status(creds.kubeconfig, "web", "--json")  # get, not list
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout)[0]["floor"] == 7

    # Beyond its Role: a cluster-wide list is forbidden: one line, exit 2.
    done = floorcast_status(creds.kubeconfig, "-A")
    assert (done.returncode, done.stdout) == (2, "")
    assert done.stderr.count("\n") == 1 and "forbidden" in done.stderr
    assert creds.username in done.stderr and "needs get and list" in done.stderr
    # A name that is not there: the real API server's 404 for an object, not the CRD.
    done = floorcast_status(creds.kubeconfig, "nope")
    assert done.returncode == 2
    assert f"no ForecastScalingPolicy 'nope' in namespace {namespace}" in done.stderr

    # Read-only: none of these runs changed the policy.
    after = custom.get_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL, "web")
    assert after["metadata"]["resourceVersion"] == rv
