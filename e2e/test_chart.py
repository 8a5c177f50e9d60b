"""The Helm chart, rendered by the pinned helm: lint, schema, hardening, RBAC, manifests.

These need helm but no cluster; e2e/test_chart_install.py takes the rendered chart
to the real API server (server-side dry run, install, the chart's ServiceAccount
running the operator).
"""

from __future__ import annotations

import importlib.util
from typing import Any

import pytest
import yaml

from e2e.chart_env import CHART, INSTALL_DIR, ROOT, VALUE_SETS, Helm, by_kind, docs
from e2e.chart_env import helm as helm  # the fixture
from e2e.manifests import HEADER

CRD_NAME = "forecastscalingpolicies.floorcast.dev.yaml"


def test_chart_crd_is_byte_identical_to_top_level_crd() -> None:
    assert (CHART / "crds" / CRD_NAME).read_bytes() == (ROOT / "crds" / CRD_NAME).read_bytes()


@pytest.mark.parametrize("name", sorted(VALUE_SETS))
def test_helm_lint_passes(helm: Helm, name: str) -> None:
    args = ["lint", "--strict", str(CHART)]
    if VALUE_SETS[name]:
        args += ["-f", str(helm.values_file(VALUE_SETS[name], name))]
    res = helm.run(*args)
    assert "0 chart(s) failed" in res.stdout


def _operator(rendered: str) -> dict[str, Any]:
    (dep,) = by_kind(rendered, "Deployment")
    (container,) = dep["spec"]["template"]["spec"]["containers"]
    return {"deployment": dep, "pod": dep["spec"]["template"]["spec"], "container": container}


def test_default_render_is_hardened_and_dry_run(helm: Helm) -> None:
    out = helm.template()
    op = _operator(out)
    # Kubernetes docs, "Pod Security Standards", Restricted profile: non-root, no
    # privilege escalation, capabilities drop ALL, seccomp RuntimeDefault.
    pod_sc, sc = op["pod"]["securityContext"], op["container"]["securityContext"]
    assert pod_sc["runAsNonRoot"] is True and pod_sc["runAsUser"] != 0
    assert pod_sc["seccompProfile"] == {"type": "RuntimeDefault"}
    assert sc["readOnlyRootFilesystem"] is True and sc["allowPrivilegeEscalation"] is False
    assert sc["capabilities"] == {"drop": ["ALL"]}
    assert op["deployment"]["spec"]["strategy"] == {"type": "Recreate"}
    assert op["deployment"]["spec"]["replicas"] == 1
    assert op["container"]["resources"]["requests"] and op["container"]["resources"]["limits"]
    probe = op["container"]["livenessProbe"]["httpGet"]
    ports = {p["name"]: p["containerPort"] for p in op["container"]["ports"]}
    assert probe == {"path": "/healthz", "port": "liveness"} and ports["liveness"] == 8081
    args = op["container"]["args"]
    assert "--dry-run" in args and "--all-namespaces" in args
    assert "--liveness-port=8081" in args and "--metrics-port=8080" in args
    assert not any(a.startswith(("--allow-url-host", "--prometheus-url")) for a in args)
    kinds = {d["kind"] for d in docs(out)}
    assert kinds == {"ServiceAccount", "ClusterRole", "ClusterRoleBinding", "Service",
                     "Deployment"}  # fmt: skip
    (svc,) = by_kind(out, "Service")
    assert svc["spec"]["ports"][0]["targetPort"] == "metrics"
    assert svc["spec"]["selector"].items() <= op["pod"].get("labels", op["deployment"]["spec"][
        "template"]["metadata"]["labels"]).items()  # fmt: skip


def test_cluster_role_rules_are_the_files_rules(helm: Helm) -> None:
    rules = yaml.safe_load((CHART / "files" / "operator-rbac.yaml").read_text())["rules"]
    (role,) = by_kind(helm.template(), "ClusterRole")
    assert role["rules"] == rules
    assert not any("secrets" in r["resources"] for r in rules)


def test_namespaced_mode_has_a_role_per_namespace_and_nothing_cluster_wide(helm: Helm) -> None:
    out = helm.template(VALUE_SETS["namespaced"])
    kinds = {d["kind"] for d in docs(out)}
    assert "ClusterRole" not in kinds and "ClusterRoleBinding" not in kinds
    assert {r["metadata"]["namespace"] for r in by_kind(out, "Role")} == {"shop", "search"}
    for rb in by_kind(out, "RoleBinding"):
        assert rb["subjects"] == [{"kind": "ServiceAccount", "name": "floorcast",
                                   "namespace": "floorcast"}]  # fmt: skip
    args = _operator(out)["container"]["args"]
    assert args[:2] == ["--namespace=shop", "--namespace=search"]
    assert "--dry-run" not in args and "--all-namespaces" not in args
    assert "--allow-url-host=forecasts.example.internal" in args and "--log-format=json" in args
    assert "--prometheus-url=http://prometheus.monitoring:9090" in args
    assert all(d["metadata"]["labels"]["team"] == "capacity" for d in docs(out))


def test_service_monitor_only_when_enabled(helm: Helm) -> None:
    assert not by_kind(helm.template(), "ServiceMonitor")
    out = helm.template(VALUE_SETS["scheduling-and-monitor"])
    (sm,) = by_kind(out, "ServiceMonitor")
    assert sm["metadata"]["labels"]["release"] == "prom"
    assert sm["spec"]["endpoints"][0]["port"] == "metrics"
    pod = _operator(out)["pod"]
    assert pod["nodeSelector"] == {"kubernetes.io/os": "linux"}
    assert pod["tolerations"][0]["key"] == "ops" and "nodeAffinity" in pod["affinity"]
    assert _operator(out)["container"]["image"] == "ghcr.io/floorcast/floorcast:0.1.0-rc1"


def test_forecast_cronjob_is_an_indexed_job_with_its_own_roles(helm: Helm) -> None:
    out = helm.template(VALUE_SETS["forecast-sharded"])
    (cron,) = by_kind(out, "CronJob")
    job = cron["spec"]["jobTemplate"]["spec"]
    # Kubernetes docs, "Jobs", "Completion mode": Indexed jobs give each pod its index
    # in JOB_COMPLETION_INDEX; completions is the number of indexes.
    assert job["completionMode"] == "Indexed" and job["completions"] == job["parallelism"] == 3
    (c,) = job["template"]["spec"]["containers"]
    assert c["command"] == ["python", "/etc/floorcast/forecast_shard.py"]
    assert "--prometheus=http://prometheus.monitoring:9090" in c["args"]
    assert c["securityContext"]["readOnlyRootFilesystem"] is True
    sa = job["template"]["spec"]["serviceAccountName"]
    roles = [r for r in by_kind(out, "Role") if r["metadata"]["name"] == sa]
    assert {r["metadata"]["namespace"] for r in roles} == {"shop", "search", "floorcast"}
    assert all(r["rules"] == [{"apiGroups": [""], "resources": ["configmaps"],
                               "verbs": ["get", "create", "patch"]}] for r in roles)  # fmt: skip
    (cm,) = [d for d in by_kind(out, "ConfigMap") if d["metadata"]["name"].endswith("-config")]
    workloads = yaml.safe_load(cm["data"]["workloads.json"])
    assert [w["configMap"] for w in workloads] == [
        "floorcast-forecast-checkout",
        "floorcast-forecast-search",
        "floorcast-forecast-local",
    ]
    assert workloads[2]["namespace"] == "floorcast"
    assert cm["data"]["forecast_shard.py"] == (CHART / "files" / "forecast_shard.py").read_text()


def test_forecast_shards_partition_the_workloads() -> None:
    spec = importlib.util.spec_from_file_location("shard", CHART / "files" / "forecast_shard.py")
    assert spec and spec.loader
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    workloads = [{"name": f"w{i}"} for i in range(10)]
    parts = [mod.mine(workloads, i, 3) for i in range(3)]
    names = [w["name"] for p in parts for w in p]
    assert sorted(names) == sorted(w["name"] for w in workloads)  # every one, once
    assert [len(p) for p in parts] == [4, 3, 3]


@pytest.mark.parametrize(
    ("values", "where"),
    [
        ({"dryRun": "yes"}, "dryRun"),
        ({"logFormat": "xml"}, "logFormat"),
        ({"interval": "soon"}, "interval"),
        ({"rbac": {"namespaced": True}}, "watchNamespaces"),
        ({"watchNamespaces": ["Not_A_Namespace"]}, "watchNamespaces"),
        ({"forecast": {"enabled": True}}, "forecast"),
        ({"forecast": {"shards": 0}}, "shards"),
        ({"replicas": 2}, "replicas"),
        ({"prometheusUrl": "prometheus:9090"}, "prometheusUrl"),
        ({"metrics": {"port": 70000}}, "port"),
    ],
)
def test_schema_rejects_bad_values(helm: Helm, values: dict[str, Any], where: str) -> None:
    res = helm.run("template", "x", str(CHART), "-f", str(helm.values_file(values)), check=False)
    assert res.returncode != 0
    assert "values don't meet the specifications of the schema" in res.stderr, res.stderr
    assert where in res.stderr, res.stderr


def test_plain_manifests_match_the_chart(helm: Helm) -> None:
    """docs/install/ is `make manifests` output; regenerate it when this fails."""
    rendered = helm.template(extra=["--include-crds"])
    committed = (INSTALL_DIR / "floorcast.yaml").read_text()
    stale = "docs/install/floorcast.yaml is stale: run `make manifests`"
    assert committed == HEADER + rendered, stale
    kustomization = yaml.safe_load((INSTALL_DIR / "kustomization.yaml").read_text())
    assert kustomization["resources"] == ["namespace.yaml", "floorcast.yaml"]
    ns = yaml.safe_load((INSTALL_DIR / "namespace.yaml").read_text())
    assert ns["kind"] == "Namespace" and ns["metadata"]["name"] == "floorcast"
    assert {d["metadata"].get("namespace") for d in docs(rendered)} <= {"floorcast", None}
