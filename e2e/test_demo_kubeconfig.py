"""`floorcast demo --kubeconfig` on a cluster it did not start (the e2e control plane).

Run as the real console script, the way a user on a throw-away cluster would. The demo
must raise the floors there, clean up only what it created (its namespace and
policies; the CRD stays for the cluster's other users), and refuse to run in a
namespace that already exists rather than delete it afterwards.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from e2e.helpers import eventually
from floorcast.cli.demo import BASELINE
from floorcast.cli.demo_live import NAMESPACE

pytestmark = pytest.mark.e2e
FLOORCAST = Path(sys.executable).parent / "floorcast"


def namespace_gone(core: k8s.CoreV1Api) -> bool:
    try:
        core.read_namespace(NAMESPACE)
    except ApiException as e:
        return e.status == 404
    return False


def demo(control_plane, out: Path) -> subprocess.CompletedProcess:
    return subprocess.run(
        [str(FLOORCAST), "demo", "--kubeconfig", str(control_plane.kubeconfig), "--duration",
         "40s", "--no-plots", "--output", str(out)],
        capture_output=True, text=True, timeout=600,
    )  # fmt: skip


def test_demo_on_a_given_cluster_raises_floors_and_removes_only_what_it_made(
    control_plane, api_client, tmp_path
) -> None:
    core = k8s.CoreV1Api(api_client)
    done = demo(control_plane, tmp_path)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-3000:]
    assert "torn down" in done.stdout
    assert "removing its finalizer" not in done.stdout  # the operator restored each baseline
    samples = json.loads((tmp_path / "live-samples.json").read_text())
    storefront = [s for s in samples if s["service"] == "storefront"]
    top = max(s["floor"] for s in storefront if isinstance(s["floor"], int))
    assert top > BASELINE, storefront
    assert any(s["minReplicas"] == top for s in storefront), storefront
    eventually(lambda: namespace_gone(core), timeout=120, what=f"namespace {NAMESPACE} deleted")
    crd = "forecastscalingpolicies.floorcast.dev"
    assert k8s.ApiextensionsV1Api(api_client).read_custom_resource_definition(crd)


def test_demo_refuses_a_namespace_that_already_exists(control_plane, api_client,
                                                      tmp_path) -> None:  # fmt: skip
    core = k8s.CoreV1Api(api_client)
    eventually(lambda: namespace_gone(core), timeout=120, what="no namespace left from before")
    core.create_namespace({"metadata": {"name": NAMESPACE}})
    try:
        core.create_namespaced_config_map(NAMESPACE, {"metadata": {"name": "someones-work"}})
        done = demo(control_plane, tmp_path)
        assert done.returncode == 2, done.stdout[-2000:] + done.stderr[-2000:]
        assert f"namespace {NAMESPACE!r} already exists" in done.stderr
        assert len(done.stderr.strip().splitlines()) == 1, done.stderr
        assert core.read_namespace(NAMESPACE).status.phase == "Active"
        assert core.read_namespaced_config_map("someones-work", NAMESPACE)
    finally:
        core.delete_namespace(NAMESPACE)
