"""Proof that the e2e cluster is real: controllers act, admission validates, RBAC denies.

These are the behaviours floorcast's operator relies on. If a fake or a stripped
control plane were substituted, at least one of these would fail: a Deployment
grows a ReplicaSet and Pods only if the real controllers run; an HPA's
``minReplicas`` moves the Deployment only if the real HPA controller does; a CRD
schema rejects bad objects only in a real API server; a token is refused only if
RBAC is enforced.
"""

from __future__ import annotations

import json
import secrets
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from e2e.controlplane.cluster import Cluster
from e2e.controlplane.runner import ControlPlane
from e2e.helpers import eventually
from floorcast.durations import DURATION_PATTERN

pytestmark = pytest.mark.e2e

IMAGE = "registry.k8s.io/pause:3.10"  # never pulled: there is no kubelet


def deployment_manifest(name: str, replicas: int = 1) -> dict[str, Any]:
    labels = {"app": name}
    container = {"name": "app", "image": IMAGE, "resources": {"requests": {"cpu": "100m"}}}
    return {
        "apiVersion": "apps/v1",
        "kind": "Deployment",
        "metadata": {"name": name, "labels": labels},
        "spec": {
            "replicas": replicas,
            "selector": {"matchLabels": labels},
            "template": {"metadata": {"labels": labels}, "spec": {"containers": [container]}},
        },
    }


def create_deployment(api: k8s.ApiClient, namespace: str, name: str) -> k8s.V1Deployment:
    body = k8s.V1Deployment.from_dict(deployment_manifest(name))
    return k8s.AppsV1Api(api).create_namespaced_deployment(namespace, body)


def owned_by(objs: list[Any], uid: str) -> list[Any]:
    return [o for o in objs if any(r.uid == uid for r in o.metadata.owner_references or [])]


def controller_log(cluster: Cluster) -> str:
    if isinstance(cluster, ControlPlane):
        return "kube-controller-manager log:\n" + cluster.log_tail("kube-controller-manager", 30)
    return ""


def events(api: k8s.ApiClient, namespace: str, kind: str) -> list[k8s.CoreV1Event]:
    items = k8s.CoreV1Api(api).list_namespaced_event(namespace).items
    return [e for e in items if e.involved_object.kind == kind]


def test_deployment_gets_replicaset_and_pods(
    control_plane: Cluster, api_client: k8s.ApiClient, namespace: str
) -> None:
    apps, core = k8s.AppsV1Api(api_client), k8s.CoreV1Api(api_client)
    dep = create_deployment(api_client, namespace, "web")

    rs = eventually(
        lambda: owned_by(apps.list_namespaced_replica_set(namespace).items, dep.metadata.uid),
        timeout=30,
        what="a ReplicaSet owned by the Deployment (deployment controller)",
        describe=lambda: controller_log(control_plane),
    )[0]
    assert rs.spec.replicas == 1

    pods = eventually(
        lambda: owned_by(core.list_namespaced_pod(namespace).items, rs.metadata.uid),
        timeout=30,
        what="a Pod owned by the ReplicaSet (replicaset controller)",
        describe=lambda: controller_log(control_plane),
    )
    assert len(pods) == 1
    pod = pods[0]
    # Admission ran for real: the ServiceAccount plugin set the account and mounted
    # a projected token. Nothing schedules or runs the Pod, so it stays Pending.
    assert pod.spec.service_account_name == "default"
    assert any(v.projected for v in pod.spec.volumes or [])
    if control_plane.is_local:
        assert pod.status.phase == "Pending"
        assert pod.spec.node_name is None

    eventually(
        lambda: (
            apps.read_namespaced_deployment(namespace=namespace, name="web").status.replicas == 1
        ),
        timeout=30,
        what="Deployment status.replicas == 1",
    )


def test_hpa_min_replicas_scales_deployment_without_metrics(
    control_plane: Cluster, api_client: k8s.ApiClient, namespace: str
) -> None:
    """The mechanism floorcast uses: raise ``minReplicas``, the HPA controller scales.

    No metrics API exists, so the HPA cannot compute a CPU-based recommendation;
    the controller still enforces ``minReplicas`` because it clamps the current
    replica count to [min, max] before it looks at metrics at all.
    """
    apps = k8s.AppsV1Api(api_client)
    autoscaling = k8s.AutoscalingV2Api(api_client)
    create_deployment(api_client, namespace, "web")
    hpa = {
        "apiVersion": "autoscaling/v2",
        "kind": "HorizontalPodAutoscaler",
        "metadata": {"name": "web"},
        "spec": {
            "scaleTargetRef": {"apiVersion": "apps/v1", "kind": "Deployment", "name": "web"},
            "minReplicas": 3,
            "maxReplicas": 5,
            "metrics": [
                {
                    "type": "Resource",
                    "resource": {
                        "name": "cpu",
                        "target": {"type": "Utilization", "averageUtilization": 50},
                    },
                }
            ],
        },
    }
    autoscaling.create_namespaced_horizontal_pod_autoscaler(
        namespace, k8s.V2HorizontalPodAutoscaler.from_dict(hpa)
    )

    def describe() -> str:
        h = autoscaling.read_namespaced_horizontal_pod_autoscaler("web", namespace)
        conds = [(c.type, c.status, c.reason, c.message) for c in h.status.conditions or []]
        evs = [
            (e.reason, e.message) for e in events(api_client, namespace, "HorizontalPodAutoscaler")
        ]
        return f"HPA conditions: {conds}\nHPA events: {evs}\n{controller_log(control_plane)}"

    eventually(
        lambda: apps.read_namespaced_deployment("web", namespace).spec.replicas == 3,
        timeout=30,
        what="the HPA controller to scale the Deployment to minReplicas=3",
        describe=describe,
    )
    rescale = eventually(
        lambda: [
            e
            for e in events(api_client, namespace, "HorizontalPodAutoscaler")
            if e.reason == "SuccessfulRescale"
        ],
        timeout=15,
        what="a SuccessfulRescale event from the HPA controller",
        describe=describe,
    )
    assert "New size: 3" in rescale[0].message, rescale[0].message
    eventually(
        lambda: len(k8s.CoreV1Api(api_client).list_namespaced_pod(namespace).items) == 3,
        timeout=30,
        what="3 Pods after the scale-up",
        describe=describe,
    )
    if control_plane.is_local:
        # And it really had no metrics: the controller says so in its conditions.
        def scaling_inactive() -> bool:
            h = autoscaling.read_namespaced_horizontal_pod_autoscaler("web", namespace)
            conds = {c.type: c for c in h.status.conditions or []}
            active = conds.get("ScalingActive")
            return active is not None and active.status == "False"

        eventually(scaling_inactive, timeout=15, what="ScalingActive=False", describe=describe)


def _crd_manifest(group: str) -> dict[str, Any]:
    spec_schema = {
        "type": "object",
        "required": ["replicas"],
        "properties": {
            "replicas": {"type": "integer", "minimum": 1},
            "window": {"type": "string", "pattern": DURATION_PATTERN},
        },
    }
    return {
        "apiVersion": "apiextensions.k8s.io/v1",
        "kind": "CustomResourceDefinition",
        "metadata": {"name": f"widgets.{group}"},
        "spec": {
            "group": group,
            "scope": "Namespaced",
            "names": {"plural": "widgets", "singular": "widget", "kind": "Widget"},
            "versions": [
                {
                    "name": "v1",
                    "served": True,
                    "storage": True,
                    "schema": {
                        "openAPIV3Schema": {
                            "type": "object",
                            "properties": {"spec": spec_schema},
                        }
                    },
                }
            ],
        },
    }


def test_crd_schema_rejects_invalid_object(api_client: k8s.ApiClient, namespace: str) -> None:
    ext = k8s.ApiextensionsV1Api(api_client)
    custom = k8s.CustomObjectsApi(api_client)
    group = f"t{secrets.token_hex(4)}.e2e.floorcast.dev"  # CRDs are cluster-wide: no reuse
    crd = ext.create_custom_resource_definition(
        k8s.V1CustomResourceDefinition.from_dict(_crd_manifest(group))
    )
    try:

        def established() -> bool:
            got = ext.read_custom_resource_definition(crd.metadata.name)
            return any(
                c.type == "Established" and c.status == "True" for c in got.status.conditions or []
            )

        eventually(established, timeout=30, what=f"CRD {crd.metadata.name} Established")

        def widget(name: str, spec: dict[str, Any]) -> dict[str, Any]:
            return {
                "apiVersion": f"{group}/v1",
                "kind": "Widget",
                "metadata": {"name": name},
                "spec": spec,
            }

        def create(body: dict[str, Any]) -> dict[str, Any]:
            return custom.create_namespaced_custom_object(group, "v1", namespace, "widgets", body)

        # The first create can race the new REST endpoint's registration (404).
        good = eventually(
            lambda: create(widget("good", {"replicas": 2, "window": "1h30m", "bogus": 1})),
            timeout=15,
            what="creating a valid Widget",
        )
        assert good["spec"] == {"replicas": 2, "window": "1h30m"}, "unknown field not pruned"

        with pytest.raises(ApiException) as err:
            create(widget("bad", {"replicas": 0, "window": "soon"}))
        assert err.value.status == 422, err.value.body
        causes = json.loads(err.value.body)["details"]["causes"]
        fields = {c["field"] for c in causes}
        assert {"spec.replicas", "spec.window"} <= fields, causes

        with pytest.raises(ApiException) as err:
            create(widget("missing", {"window": "5m"}))
        assert err.value.status == 422
        assert "spec.replicas: Required value" in err.value.body
    finally:
        ext.delete_custom_resource_definition(crd.metadata.name)


def test_service_account_without_rbac_is_forbidden(
    control_plane: Cluster,
    api_client: k8s.ApiClient,
    namespace: str,
    service_account: Callable[..., Any],
    client_for: Callable[[Path], k8s.ApiClient],
) -> None:
    creds = service_account(namespace, "nobody")
    as_sa = client_for(creds.kubeconfig)

    # Authenticated (this is not a 401): the API server knows who the token is...
    review = k8s.AuthenticationV1Api(as_sa).create_self_subject_review(
        k8s.V1SelfSubjectReview.from_dict(
            {"apiVersion": "authentication.k8s.io/v1", "kind": "SelfSubjectReview"}
        )
    )
    assert review.status.user_info.username == creds.username
    # ...and RBAC grants it nothing.
    with pytest.raises(ApiException) as err:
        k8s.CoreV1Api(as_sa).list_namespaced_config_map(namespace)
    assert err.value.status == 403, err.value.body
    assert creds.username in err.value.body
    res = control_plane.kubectl(
        "auth",
        "can-i",
        "list",
        "configmaps",
        "-n",
        namespace,
        kubeconfig=creds.kubeconfig,
        check=False,
    )
    assert (res.returncode, res.stdout.strip()) == (1, "no"), res

    # A Role + RoleBinding is all it takes: RBAC decides, not a blanket refusal.
    rbac = k8s.RbacAuthorizationV1Api(api_client)
    rbac.create_namespaced_role(
        namespace,
        k8s.V1Role.from_dict(
            {
                "metadata": {"name": "read-configmaps"},
                "rules": [{"apiGroups": [""], "resources": ["configmaps"], "verbs": ["list"]}],
            }
        ),
    )
    rbac.create_namespaced_role_binding(
        namespace,
        k8s.V1RoleBinding.from_dict(
            {
                "metadata": {"name": "read-configmaps"},
                "roleRef": {
                    "apiGroup": "rbac.authorization.k8s.io",
                    "kind": "Role",
                    "name": "read-configmaps",
                },
                "subjects": [{"kind": "ServiceAccount", "name": "nobody", "namespace": namespace}],
            }
        ),
    )
    eventually(
        lambda: k8s.CoreV1Api(as_sa).list_namespaced_config_map(namespace) is not None,
        timeout=15,
        what="the RoleBinding to take effect",
    )
    with pytest.raises(ApiException) as err:
        k8s.CoreV1Api(as_sa).list_namespaced_secret(namespace)
    assert err.value.status == 403
