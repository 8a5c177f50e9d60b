"""Kubeconfigs for ServiceAccounts, with tokens from the TokenRequest API.

The operator runs in-cluster as a ServiceAccount whose powers come only from the
RBAC the chart ships. To test exactly those powers, e2e tests run it (or kubectl)
with a kubeconfig holding a freshly minted token for that ServiceAccount, rather
than the admin certificate, which bypasses RBAC altogether.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from e2e.controlplane import pki
from e2e.controlplane.cluster import Cluster, current_cluster_entry


@dataclass(frozen=True)
class ServiceAccountCredentials:
    """A minted token and a kubeconfig that uses it."""

    namespace: str
    name: str
    token: str
    kubeconfig: Path

    @property
    def username(self) -> str:
        """The user name RBAC and audit logs see for this token."""
        return f"system:serviceaccount:{self.namespace}:{self.name}"


def ensure_service_account(api: k8s.ApiClient, namespace: str, name: str) -> None:
    """Create the ServiceAccount unless it exists."""
    core = k8s.CoreV1Api(api)
    body = k8s.V1ServiceAccount(metadata=k8s.V1ObjectMeta(name=name))
    try:
        core.create_namespaced_service_account(namespace, body)
    except ApiException as exc:
        if exc.status != 409:
            raise


def mint_token(
    api: k8s.ApiClient,
    namespace: str,
    name: str,
    *,
    expiration_seconds: int = 3600,
    audiences: list[str] | None = None,
) -> str:
    """A bound token for ServiceAccount ``namespace/name`` via TokenRequest.

    ``audiences`` defaults to the API server's own; the minimum lifetime the API
    server accepts is 600 s.
    """
    spec = k8s.V1TokenRequestSpec(audiences=audiences or [], expiration_seconds=expiration_seconds)
    req = k8s.AuthenticationV1TokenRequest(spec=spec)
    resp = k8s.CoreV1Api(api).create_namespaced_service_account_token(name, namespace, req)
    return str(resp.status.token)


def token_kubeconfig(
    source_kubeconfig: Path,
    token: str,
    dest: Path,
    *,
    namespace: str | None = None,
    user: str = "service-account",
) -> Path:
    """Write a kubeconfig for ``token`` that reaches the same cluster as the source.

    The cluster entry (server, CA) is copied from the source's current context, so
    this works for the local control plane and for any external cluster alike.
    """
    _, cluster = current_cluster_entry(source_kubeconfig)
    config = pki.kubeconfig_dict("", b"", {"token": token}, name=user, namespace=namespace)
    config["clusters"] = [{"name": user, "cluster": cluster}]
    return pki.write_kubeconfig(dest, config)


def service_account_credentials(
    cluster: Cluster,
    namespace: str,
    name: str,
    dest_dir: Path,
    *,
    create: bool = True,
    expiration_seconds: int = 3600,
) -> ServiceAccountCredentials:
    """Create (optionally) the ServiceAccount, mint a token, write its kubeconfig."""
    with cluster.api_client() as api:
        if create:
            ensure_service_account(api, namespace, name)
        token = mint_token(api, namespace, name, expiration_seconds=expiration_seconds)
    path = token_kubeconfig(
        cluster.kubeconfig,
        token,
        dest_dir / f"{namespace}.{name}.kubeconfig",
        namespace=namespace,
        user=f"{namespace}-{name}",
    )
    return ServiceAccountCredentials(namespace, name, token, path)


def bind_cluster_role(
    api: k8s.ApiClient, namespace: str, service_account: str, role: str = "floorcast-operator"
) -> None:
    """Grant ``role`` (a ClusterRole) to a ServiceAccount in ``namespace`` only, with a
    RoleBinding of the same name: how the operator is run with exactly its RBAC."""
    k8s.RbacAuthorizationV1Api(api).create_namespaced_role_binding(namespace, {
        "metadata": {"name": role},
        "roleRef": {"apiGroup": "rbac.authorization.k8s.io", "kind": "ClusterRole",
                    "name": role},
        "subjects": [{"kind": "ServiceAccount", "name": service_account,
                      "namespace": namespace}],
    })  # fmt: skip
