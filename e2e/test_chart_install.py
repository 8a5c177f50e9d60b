"""The chart on the real control plane: server-side dry run, install/uninstall, and
the chart's own ServiceAccount running a real `floorcast run`.

There is no kubelet (nor scheduler) in the harness, so the operator's pod stays
Pending; what these tests prove is that the API server accepts every object, that
Helm tracks and removes them, and that the RBAC the chart grants is enough for the
operator and no more.
"""

from __future__ import annotations

import importlib.util
import os
import secrets
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from e2e.chart_env import CHART, INSTALL_DIR, ROOT, VALUE_SETS, Helm, docs
from e2e.chart_env import helm as helm  # the fixture
from e2e.helpers import eventually
from e2e.operator_env import BASELINE, Env, forecast_json, min_replicas, policy_body
from floorcast.core.series_text import parse_forecast


def _apply_dry_run(control_plane, rendered: str) -> str:
    res = control_plane.kubectl("apply", "--dry-run=server", "-f", "-", input=rendered)
    return res.stdout


@pytest.mark.parametrize("name", ["default", "namespaced", "forecast-sharded"])
def test_rendered_chart_passes_server_side_dry_run(
    helm: Helm, control_plane, namespace: str, name: str
) -> None:
    values = dict(VALUE_SETS[name])
    # Objects for other namespaces need those namespaces to exist: use the test's.
    if name == "namespaced":
        values["watchNamespaces"] = [namespace]
    if name == "forecast-sharded":
        values["forecast"] = {
            **values["forecast"],
            "workloads": [
                {"name": "a", "namespace": namespace, "query": "up"},
                {"name": "b", "query": "up"},
            ],
        }
    rendered = helm.template(values, release=f"dry-{name}", namespace=namespace,
                             extra=["--include-crds"])  # fmt: skip
    out = _apply_dry_run(control_plane, rendered)
    # One "(server dry run)" line per object: the API server validated each one.
    assert out.count("(server dry run)") == len(docs(rendered)), out


def test_plain_manifests_pass_server_side_dry_run(control_plane, api_client) -> None:
    # A dry-run Namespace is not persisted, and the objects inside it need a real one:
    # make it for the test (the CRD and ClusterRole stay dry-run, so nothing leaks).
    core = k8s.CoreV1Api(api_client)
    core.create_namespace({"metadata": {"name": "floorcast"}})
    try:
        res = control_plane.kubectl("apply", "--dry-run=server", "-k", str(INSTALL_DIR))
    finally:
        core.delete_namespace("floorcast")
    assert "deployment.apps/floorcast created (server dry run)" in res.stdout, res.stdout
    assert "clusterrole.rbac.authorization.k8s.io/floorcast created" in res.stdout
    assert (
        res.stdout.count("(server dry run)")
        == len(docs((INSTALL_DIR / "floorcast.yaml").read_text())) + 1
    ), res.stdout  # + Namespace


def test_install_then_uninstall_removes_what_it_created(
    helm: Helm, control_plane, namespace: str, api_client: k8s.ApiClient
) -> None:
    release = f"fc-{secrets.token_hex(3)}"
    kc = control_plane.kubeconfig
    res = helm.run("install", release, str(CHART), "--namespace", namespace, kubeconfig=kc)
    assert "Policies start in dry-run" in res.stdout  # NOTES.txt
    assert "STATUS: deployed" in res.stdout
    apps, core = k8s.AppsV1Api(api_client), k8s.CoreV1Api(api_client)
    rbac = k8s.RbacAuthorizationV1Api(api_client)
    name = f"{release}-floorcast"
    assert apps.read_namespaced_deployment(name, namespace).spec.strategy.type == "Recreate"
    rbac.read_cluster_role(name)
    rbac.read_cluster_role_binding(name)
    core.read_namespaced_service(f"{name}-metrics", namespace)
    # No kubelet or scheduler: the ReplicaSet controller makes the pod, nobody runs it.
    pods = eventually(lambda: core.list_namespaced_pod(namespace).items, timeout=30,
                      what="the operator pod to be created")  # fmt: skip
    assert [p.status.phase for p in pods] == ["Pending"]
    status = helm.run("status", release, "--namespace", namespace, kubeconfig=kc).stdout
    assert "STATUS: deployed" in status

    helm.run("uninstall", release, "--namespace", namespace, "--wait", kubeconfig=kc)
    for read in (lambda: rbac.read_cluster_role(name),
                 lambda: rbac.read_cluster_role_binding(name),
                 lambda: apps.read_namespaced_deployment(name, namespace),
                 lambda: core.read_namespaced_service_account(name, namespace)):  # fmt: skip
        with pytest.raises(ApiException) as e:
            read()
        assert e.value.status == 404
    # Helm never deletes CRDs from crds/ (Helm docs, "Custom Resource Definitions",
    # "Some caveats and explanations"): the policies survive an uninstall.
    k8s.ApiextensionsV1Api(api_client).read_custom_resource_definition(
        "forecastscalingpolicies.floorcast.dev"
    )


def _can_i(control_plane, kubeconfig: Path, *args: str) -> bool:
    res = control_plane.kubectl("auth", "can-i", *args, kubeconfig=kubeconfig, check=False)
    return res.stdout.strip() == "yes"


def test_chart_service_account_runs_the_operator_namespaced(
    helm: Helm, control_plane, namespace: str, api_client: k8s.ApiClient,
    service_account, tmp_path: Path,
) -> None:  # fmt: skip
    """The token of the SA the chart made, bound only by the chart's Role, drives a
    real `floorcast run` through the Enforce scenario, and is refused elsewhere."""
    release = f"fc-{secrets.token_hex(3)}"
    values = helm.values_file({"rbac": {"namespaced": True}, "watchNamespaces": [namespace]})
    helm.run("install", release, str(CHART), "--namespace", namespace, "-f", str(values),
             kubeconfig=control_plane.kubeconfig)  # fmt: skip
    try:
        creds = service_account(namespace, f"{release}-floorcast", create=False)
        kc = creds.kubeconfig
        # Kubernetes docs, "Using RBAC Authorization": a RoleBinding grants only within
        # its namespace; nothing in the chart mentions Secrets.
        assert _can_i(control_plane, kc, "patch", "horizontalpodautoscalers", "-n", namespace)
        assert not _can_i(control_plane, kc, "get", "secrets", "-n", namespace)
        assert not _can_i(control_plane, kc, "list", "configmaps", "-n", "default")
        assert not _can_i(control_plane, kc, "patch", "horizontalpodautoscalers",
                          "-n", "default")  # fmt: skip
        forbidden = control_plane.kubectl("get", "secrets", "-n", namespace, kubeconfig=kc,
                                          check=False)  # fmt: skip
        assert forbidden.returncode != 0 and "Forbidden" in forbidden.stderr

        env = Env(api_client, namespace, kc, tmp_path, [])
        try:
            env.create_workload()
            env.put_forecast(forecast_json())
            env.start_operator()
            env.create_policy(policy_body("p", mode="Enforce"))
            # Same scenario as e2e/test_operator.py: peak 6.5 at perReplica 1 → 7.
            env.wait(min_replicas(env, 7), "floor raised to 7 by the chart's SA", timeout=60)
            env.wait(lambda: (env.condition("p") or {}).get("status") == "True", "Ready")
            env.custom.delete_namespaced_custom_object("floorcast.dev", "v1alpha1", namespace,
                                                       "forecastscalingpolicies", "p")  # fmt: skip
            env.wait(min_replicas(env, BASELINE), "baseline restored on delete", timeout=60)
            assert "403" not in env.operator_log(), env.operator_log()
        finally:
            env.stop_all()
    finally:
        helm.run("uninstall", release, "--namespace", namespace, "--wait",
                 kubeconfig=control_plane.kubeconfig)  # fmt: skip


def _load_prometheus_harness():  # tests/ is not a package: load the module by path
    spec = importlib.util.spec_from_file_location(
        "prometheus_server", ROOT / "tests" / "prometheus_server.py"
    )
    assert spec and spec.loader
    mod = importlib.util.module_from_spec(spec)
    sys.modules.setdefault("prometheus_server", mod)
    spec.loader.exec_module(mod)
    return mod


def test_forecast_job_shards_write_labelled_configmaps_with_the_charts_rbac(
    helm: Helm, control_plane, namespace: str, api_client: k8s.ApiClient,
    service_account, tmp_path: Path,
) -> None:  # fmt: skip
    """Each shard of the Indexed Job, run as the chart's forecast ServiceAccount against
    a real Prometheus, writes only its own workloads' ConfigMaps, which parse."""
    prom = _load_prometheus_harness()
    release = f"fc-{secrets.token_hex(3)}"
    with prom.running_server() as server:
        end = pd.Timestamp(server.history.end, unit="s", tz="UTC").strftime("%Y-%m-%dT%H:%M:%SZ")
        values = {"forecast": {
            "enabled": True, "prometheus": server.url, "shards": 2, "lookback": "2d",
            "method": "seasonal-naive", "season": "1d", "horizon": "24h",
            "schedule": "0 0 1 1 *", "extraArgs": [f"--end={end}"],
            "workloads": [{"name": s, "namespace": namespace,
                           "query": f'{prom.METRIC}{{service="{s}"}}'} for s in prom.SERVICES],
        }}  # fmt: skip
        path = helm.values_file(values, "forecast-e2e")
        rendered = helm.template(values, release=release, namespace=namespace)
        helm.run("install", release, str(CHART), "--namespace", namespace, "-f", str(path),
                 kubeconfig=control_plane.kubeconfig)  # fmt: skip
        try:
            (cron,) = [d for d in docs(rendered) if d["kind"] == "CronJob"]
            pod = cron["spec"]["jobTemplate"]["spec"]["template"]["spec"]
            (c,) = pod["containers"]
            (cm,) = [d for d in docs(rendered) if d["kind"] == "ConfigMap"]
            (tmp_path / "workloads.json").write_text(cm["data"]["workloads.json"])
            script = tmp_path / "forecast_shard.py"
            script.write_text(cm["data"]["forecast_shard.py"])
            creds = service_account(namespace, pod["serviceAccountName"], create=False)
            env = {k: v for k, v in os.environ.items() if k != "KUBERNETES_SERVICE_HOST"}
            env.update({e["name"]: e["value"] for e in c["env"]})
            env.update(FLOORCAST_WORKLOADS=str(tmp_path / "workloads.json"),
                       KUBECONFIG=str(creds.kubeconfig), TMPDIR=str(tmp_path), HOME=str(tmp_path),
                       MPLCONFIGDIR=str(tmp_path / "mpl"),
                       PATH=f"{Path(sys.executable).parent}:{env['PATH']}")  # fmt: skip
            core = k8s.CoreV1Api(api_client)
            written: list[set[str]] = []
            for index in (0, 1):
                run = subprocess.run([sys.executable, str(script), *c["args"]],
                                     env={**env, "JOB_COMPLETION_INDEX": str(index)},
                                     capture_output=True, text=True, timeout=300)  # fmt: skip
                assert run.returncode == 0, run.stderr
                maps = core.list_namespaced_config_map(
                    namespace, label_selector="floorcast.dev/forecast=true"
                ).items
                written.append({m.metadata.name for m in maps} - set().union(*written))
            # Workloads 0 and 2 go to shard 0, workload 1 to shard 1 (i % 2).
            p = "floorcast-forecast-"
            assert written == [{p + prom.SERVICES[0], p + prom.SERVICES[2]},
                               {p + prom.SERVICES[1]}]  # fmt: skip
            for name in set().union(*written):
                text = core.read_namespaced_config_map(name, namespace).data["forecast.json"]
                fc = parse_forecast(text, source=name)
                assert len(fc.values) == 24 * 12 and float(fc.values.max()) > 0
            # The forecast SA may write ConfigMaps and nothing else.
            assert not _can_i(control_plane, creds.kubeconfig, "get", "secrets", "-n", namespace)
            assert not _can_i(control_plane, creds.kubeconfig, "patch",
                              "horizontalpodautoscalers", "-n", namespace)  # fmt: skip
        finally:
            helm.run("uninstall", release, "--namespace", namespace, "--wait",
                     kubeconfig=control_plane.kubeconfig)  # fmt: skip
