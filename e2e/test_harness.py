"""The harness itself: restarts work, failures explain themselves, nothing leaks.

A harness that leaves etcd or an API server running after a failed test poisons
every later run on the machine, and one whose start-up errors say only "timed
out" costs an afternoon per failure. These tests pin both down. They exercise
the local control plane, so they do not apply to an external cluster.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from kubernetes import client as k8s

from e2e.controlplane.cluster import Cluster
from e2e.controlplane.process import ControlPlaneError, pid_alive
from e2e.controlplane.runner import ControlPlane
from e2e.helpers import eventually
from e2e.test_controlplane import create_deployment, owned_by

pytestmark = pytest.mark.e2e

REPO = Path(__file__).resolve().parent.parent


@pytest.fixture
def local(control_plane: Cluster) -> ControlPlane:
    if not isinstance(control_plane, ControlPlane):
        pytest.skip("tests the local harness; FLOORCAST_KUBECONFIG points at another cluster")
    return control_plane


def _pids_mentioning(text: str) -> list[int]:
    """Pids whose command line contains ``text`` (e.g. a run directory)."""
    found = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit() and int(entry.name) != os.getpid():
            try:
                cmdline = (entry / "cmdline").read_bytes().replace(b"\0", b" ").decode()
            except OSError:
                continue
            if text in cmdline and pid_alive(int(entry.name)):
                found.append(int(entry.name))
    return found


def test_restart_apiserver_keeps_port_data_and_controllers(
    local: ControlPlane, api_client: k8s.ApiClient, namespace: str
) -> None:
    core = k8s.CoreV1Api(api_client)
    core.create_namespaced_config_map(
        namespace, k8s.V1ConfigMap.from_dict({"metadata": {"name": "before"}, "data": {"a": "1"}})
    )
    old_pid = local.pids()["kube-apiserver"]
    server = local.server

    local.restart_apiserver()

    assert local.server == server
    new_pid = local.pids()["kube-apiserver"]
    assert new_pid != old_pid and not pid_alive(old_pid)
    # Existing clients reconnect to the same address; etcd kept the data.
    got = eventually(
        lambda: core.read_namespaced_config_map("before", namespace),
        timeout=15,
        what="reading the ConfigMap after the restart",
    )
    assert got.data == {"a": "1"}
    # The controller-manager reconnected too (it must not have exited).
    dep = create_deployment(api_client, namespace, "after-restart")
    eventually(
        lambda: owned_by(
            k8s.AppsV1Api(api_client).list_namespaced_replica_set(namespace).items,
            dep.metadata.uid,
        ),
        timeout=30,
        what="a ReplicaSet for a Deployment created after the restart",
        describe=lambda: local.log_tail("kube-controller-manager"),
    )
    local.check_alive()


def test_failed_start_reports_the_log_and_leaves_nothing(local: ControlPlane) -> None:
    cp = ControlPlane(extra_apiserver_args=["--no-such-flag=1"], ready_timeout=30)
    with pytest.raises(ControlPlaneError) as err:
        cp.start()
    message = str(err.value)
    assert "kube-apiserver exited" in message
    assert "no-such-flag" in message, message  # the component's own words, from its log
    assert cp.pids(), "etcd should have been started before the API server failed"
    assert not [p for p in cp.pids().values() if pid_alive(p)]
    assert cp.run_dir is not None and not cp.run_dir.exists()


def test_stop_leaves_no_processes_or_files(local: ControlPlane) -> None:
    with ControlPlane() as cp:
        pids = cp.pids()
        run_dir = cp.run_dir
        assert set(pids) == {"etcd", "kube-apiserver", "kube-controller-manager"}
        assert run_dir is not None
        with cp.api_client() as api:
            assert k8s.VersionApi(api).get_code().git_version == "v1.37.2"
        assert cp.kubectl("get", "--raw", "/readyz").stdout.strip() == "ok"
    assert not [p for p in pids.values() if pid_alive(p)]
    assert not run_dir.exists()
    assert not _pids_mentioning(str(run_dir))


def _start_up_command(stderr: Path) -> tuple[subprocess.Popen[str], Path]:
    with open(stderr, "w") as err:
        proc = subprocess.Popen(
            [sys.executable, "-m", "e2e.controlplane", "up"],
            cwd=REPO,
            stdout=subprocess.PIPE,
            stderr=err,
            text=True,
        )
    assert proc.stdout is not None
    for line in proc.stdout:
        if line.startswith("export KUBECONFIG="):
            return proc, Path(line.split("=", 1)[1].strip())
    proc.wait(timeout=10)
    raise AssertionError(
        f"`up` exited {proc.returncode} without printing a kubeconfig:\n{stderr.read_text()}"
    )


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL], ids=["sigterm", "sigkill"])
def test_up_command_cleans_up_when_killed(
    local: ControlPlane, sig: signal.Signals, tmp_path: Path
) -> None:
    """SIGTERM: orderly stop. SIGKILL: no handler runs, PR_SET_PDEATHSIG still kills all."""
    proc, kubeconfig = _start_up_command(tmp_path / "up.stderr")
    run_dir = kubeconfig.parent
    try:
        children = _pids_mentioning(str(run_dir))
        assert len(children) == 3, children  # etcd, kube-apiserver, kube-controller-manager
        assert local.kubectl("get", "--raw", "/readyz", kubeconfig=kubeconfig).stdout == "ok"
        proc.send_signal(sig)
        code = proc.wait(timeout=30)
        assert code == (0 if sig == signal.SIGTERM else -signal.SIGKILL)
        deadline = time.monotonic() + 10
        while [p for p in children if pid_alive(p)] and time.monotonic() < deadline:
            time.sleep(0.1)
        assert not [p for p in children if pid_alive(p)]
        if sig == signal.SIGTERM:
            assert not run_dir.exists()
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        if sig == signal.SIGKILL:  # nothing could remove it; the test does
            subprocess.run(["rm", "-rf", str(run_dir)], check=False)
