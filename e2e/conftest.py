"""Fixtures for the e2e suite: a real control plane, fresh namespaces, RBAC-bound tokens.

By default the suite starts its own control plane (``e2e/controlplane``); with
``FLOORCAST_KUBECONFIG=/path/to/kubeconfig`` it uses that cluster instead (kind, a
test cluster). If the control plane cannot be built or started, every e2e test
*errors* with the reason: an e2e suite that skips when its cluster is missing lets
CI go green without having tested anything.
"""

from __future__ import annotations

import os
import re
import secrets
import sys
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from e2e.controlplane import build
from e2e.controlplane.cluster import Cluster, ExternalCluster
from e2e.controlplane.living import LivingSettings
from e2e.controlplane.process import ControlPlaneError, pid_alive
from e2e.controlplane.runner import ControlPlane
from e2e.controlplane.tokens import ServiceAccountCredentials, service_account_credentials
from e2e.helpers import eventually

# The operator tests' fixtures (a workload namespace bound to the operator's RBAC).
from e2e.operator_env import env_fixture, operator_cluster  # noqa: F401

KUBECONFIG_ENV = "FLOORCAST_KUBECONFIG"
E2E_DIR = Path(__file__).resolve().parent
NAMESPACE_LABEL = "e2e.floorcast.dev/test"

_build_error: BaseException | None = None

#: The living cluster the scenarios run on: Pods Ready 40 s after they start (the
#: "pods take minutes to serve" of production, time-compressed), metrics-server at its
#: default 15 s resolution, and the HPA controller syncing every 5 s (15 s by default
#: in a real cluster; shorter here so a scenario fits in minutes).
LIVING = LivingSettings(pod_ready_delay=40.0)
LIVING_HPA_SYNC = "5s"

#: A factory: ``make(namespace, name="floorcast-operator", *, create=True)``.
ServiceAccountFactory = Callable[..., ServiceAccountCredentials]


def _is_e2e(item: pytest.Item) -> bool:
    return E2E_DIR in Path(str(item.path)).resolve().parents


@pytest.hookimpl(tryfirst=True)
def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    """Mark everything under e2e/ as ``e2e`` (tryfirst: before ``-m`` deselects)."""
    for item in items:
        if _is_e2e(item):
            item.add_marker(pytest.mark.e2e)


def pytest_collection_finish(session: pytest.Session) -> None:
    """Build the binaries (if missing) before any test runs.

    A cold build takes 20-40 minutes; inside a fixture it would count against the
    first test's pytest-timeout. Here it is outside every timeout, and its
    progress is shown live. A failure is stored and re-raised by the fixture, so
    it fails the e2e tests rather than aborting the whole session.
    """
    global _build_error
    if os.environ.get(KUBECONFIG_ENV) or session.config.option.collectonly:
        return
    if not any(_is_e2e(item) for item in session.items):
        return
    extra = (build.helm_path(), build.kwok_path(), build.metrics_server_path())
    if all(p.exists() for p in (*build.binaries().all(), *extra)):
        return
    capman = session.config.pluginmanager.getplugin("capturemanager")
    try:
        with capman.global_and_fixture_disabled():
            # helm (chart tests), kwok and metrics-server (the living cluster) too,
            # all outside every timeout.
            build.ensure_all()
    except Exception as exc:
        _build_error = exc


@pytest.fixture(scope="session")
def control_plane() -> Iterator[Cluster]:
    """The cluster under test: the harness's own control plane, or FLOORCAST_KUBECONFIG's.

    Session-scoped: starting one takes seconds, and tests isolate themselves with
    the ``namespace`` fixture. At teardown it checks that no component crashed
    during the run and that stopping left no process behind.
    """
    external = os.environ.get(KUBECONFIG_ENV)
    if external:
        yield ExternalCluster(Path(external))
        return
    if _build_error is not None:
        raise ControlPlaneError(
            f"building the control plane failed: {_build_error}"
        ) from _build_error
    yield from _checked(ControlPlane(), "up")


def _checked(cp: ControlPlane, label: str) -> Iterator[ControlPlane]:
    """Start ``cp``, yield it, then fail if a component crashed meanwhile or if
    stopping left any process behind."""
    cp.start()
    timings = ", ".join(f"{k} {v:.1f}s" for k, v in cp.startup_seconds.items())
    print(f"\n[controlplane] {label} at {cp.server} ({timings})", file=sys.stderr)
    crashed: ControlPlaneError | None = None
    try:
        yield cp
        try:
            cp.check_alive()
        except ControlPlaneError as exc:
            crashed = exc
    finally:
        pids = cp.pids()
        cp.stop()
    leaked = {name: pid for name, pid in pids.items() if pid_alive(pid)}
    if crashed is not None:
        raise crashed
    if leaked:
        raise ControlPlaneError(f"processes still running after stop(): {leaked}")


@pytest.fixture(scope="session")
def living_plane() -> Iterator[ControlPlane]:
    """A second, living control plane: kube-scheduler, kwok Nodes whose Pods become
    Ready after ``LIVING.pod_ready_delay``, metrics-server behind the aggregation layer,
    and an HPA controller that scales on those metrics (``LIVING_HPA_SYNC``).

    Separate from ``control_plane`` so the many tests that need no running Pods stay
    fast and undisturbed; the same crash and leak checks apply at teardown.
    """
    if os.environ.get(KUBECONFIG_ENV):
        raise ControlPlaneError(
            "the living-cluster scenarios need the harness's own control plane "
            f"(unset {KUBECONFIG_ENV})"
        )
    if _build_error is not None:
        raise ControlPlaneError(f"building the control plane failed: {_build_error}")
    cp = ControlPlane(living=LIVING, hpa_sync_period=LIVING_HPA_SYNC)
    yield from _checked(cp, "living cluster up")


@pytest.fixture(scope="session")
def api_client(control_plane: Cluster) -> Iterator[k8s.ApiClient]:
    """An admin ApiClient shared by the session (RBAC does not apply to it)."""
    with control_plane.api_client() as api:
        yield api


def _slug(text: str, limit: int = 30) -> str:
    return re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")[:limit].strip("-")


@pytest.fixture
def namespace(
    request: pytest.FixtureRequest, control_plane: Cluster, api_client: k8s.ApiClient
) -> Iterator[str]:
    """A fresh namespace named after the test, deleted afterwards.

    Waits for the namespace's ``default`` ServiceAccount: until the serviceaccount
    controller has made it, admission rejects every Pod, which would show up as
    a confusing delay in whatever the test is waiting for.
    """
    core = k8s.CoreV1Api(api_client)
    name = f"e2e-{_slug(request.node.name)}-{secrets.token_hex(3)}"
    core.create_namespace(
        k8s.V1Namespace.from_dict(
            {"metadata": {"name": name, "labels": {NAMESPACE_LABEL: _slug(request.node.name, 63)}}}
        )
    )

    def describe() -> str:
        if isinstance(control_plane, ControlPlane):
            return "kube-controller-manager log:\n" + control_plane.log_tail(
                "kube-controller-manager"
            )
        return ""

    eventually(
        lambda: core.read_namespaced_service_account("default", name),
        timeout=30,
        what=f"ServiceAccount {name}/default (serviceaccount controller)",
        describe=describe,
    )
    try:
        yield name
    finally:
        try:
            core.delete_namespace(name)
        except ApiException as exc:
            if exc.status != 404:
                raise


@pytest.fixture
def service_account(control_plane: Cluster, tmp_path: Path) -> ServiceAccountFactory:
    """Factory for ServiceAccount credentials: token (TokenRequest API) + kubeconfig.

    ``service_account(namespace, name="floorcast-operator", *, create=True,
    expiration_seconds=3600)`` returns a ``ServiceAccountCredentials`` with
    ``.token``, ``.kubeconfig`` (a Path), ``.username``. Whatever that identity
    may do is exactly what RBAC grants it: use it to run the operator or kubectl
    (``control_plane.kubectl(..., kubeconfig=creds.kubeconfig)``).
    """

    def make(
        namespace: str,
        name: str = "floorcast-operator",
        *,
        create: bool = True,
        expiration_seconds: int = 3600,
    ) -> ServiceAccountCredentials:
        return service_account_credentials(
            control_plane,
            namespace,
            name,
            tmp_path,
            create=create,
            expiration_seconds=expiration_seconds,
        )

    return make


@pytest.fixture
def client_for() -> Iterator[Callable[[Path], k8s.ApiClient]]:
    """Factory ``client_for(kubeconfig_path) -> ApiClient``, closed after the test."""
    from kubernetes import config as k8s_config

    made: list[k8s.ApiClient] = []

    def make(kubeconfig: Path) -> k8s.ApiClient:
        api = k8s_config.new_client_from_config(config_file=str(kubeconfig))
        made.append(api)
        return api

    yield make
    for api in made:
        api.close()


def pytest_report_header(config: pytest.Config) -> str:
    target = os.environ.get(KUBECONFIG_ENV)
    if target:
        return f"e2e cluster: {KUBECONFIG_ENV}={target}"
    return f"e2e cluster: local control plane, binaries in {build.bin_dir()}"
