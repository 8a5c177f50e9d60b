"""Start the operator in-process with the project's settings (what `floorcast run` calls).

kopf's settings that matter here: no kopf-posted Events (we post our own, and an idle
operator must make no writes), progress kept in annotations (the status schema would
prune kopf's own status fields), short watch timeouts so a restarted API server is
noticed quickly, and standalone mode (see handlers.py).
"""

from __future__ import annotations

import logging
import os
from typing import Any

import kopf
from kubernetes import client as k8s
from kubernetes import config as k8s_config

from floorcast.controller import metrics
from floorcast.controller.handlers import register
from floorcast.controller.reconcile import Runtime
from floorcast.controller.settings import Settings

log = logging.getLogger("floorcast.operator")


def api_client(settings: Settings) -> k8s.ApiClient:
    """The official client: the kubeconfig if given, else in-cluster, else ~/.kube/config."""
    cfg = k8s.Configuration()
    if settings.kubeconfig:
        k8s_config.load_kube_config(config_file=settings.kubeconfig, client_configuration=cfg)
    else:
        try:
            k8s_config.load_incluster_config(client_configuration=cfg)
        except k8s_config.ConfigException:
            k8s_config.load_kube_config(client_configuration=cfg)
    cfg.connection_pool_maxsize = 32  # kopf runs sync handlers on a thread pool
    return k8s.ApiClient(cfg)


def run(settings: Settings) -> None:
    if settings.kubeconfig:
        os.environ["KUBECONFIG"] = settings.kubeconfig  # kopf's own login reads it
    kopf.configure(
        verbose=False,
        log_format=kopf.LogFormat.JSON if settings.log_format == "json" else kopf.LogFormat.FULL,
    )
    logging.getLogger("floorcast").setLevel(logging.INFO)
    registry = kopf.OperatorRegistry()
    rt = Runtime(settings=settings, api=api_client(settings))
    register(registry, rt)

    @kopf.on.login(registry=registry)
    def login(**kwargs: Any) -> kopf.ConnectionInfo | None:
        if settings.kubeconfig:
            return kopf.login_with_kubeconfig(**kwargs)
        return kopf.login_with_service_account(**kwargs) or kopf.login_with_kubeconfig(**kwargs)

    @kopf.on.startup(registry=registry)
    def configure(settings: kopf.OperatorSettings, **_: Any) -> None:
        settings.posting.enabled = False
        # No CRD/namespace watches: fewer connections and no cluster-wide RBAC. The CRD
        # must be installed before the operator starts (the chart does that).
        settings.scanning.disabled = True
        settings.persistence.progress_storage = kopf.AnnotationsProgressStorage(
            prefix="floorcast.dev"
        )
        settings.persistence.diffbase_storage = kopf.AnnotationsDiffBaseStorage(
            prefix="floorcast.dev", key="last-handled-configuration"
        )
        settings.persistence.finalizer = "floorcast.dev/restore-baseline"
        settings.watching.server_timeout = 60
        settings.watching.client_timeout = 90
        settings.watching.connect_timeout = 5
        settings.networking.request_timeout = 30
        settings.execution.max_workers = 8

    if settings.metrics_port:
        metrics.serve(settings.metrics_port)
    liveness = (
        f"http://0.0.0.0:{settings.liveness_port}/healthz" if settings.liveness_port else None
    )
    where = "all namespaces" if settings.all_namespaces else ", ".join(settings.namespaces)
    log.info("floorcast operator starting: %s, interval %gs, dry-run %s", where,
             settings.interval_seconds, settings.dry_run)  # fmt: skip
    kopf.run(
        registry=registry,
        standalone=True,
        clusterwide=settings.all_namespaces,
        namespaces=list(settings.namespaces),
        liveness_endpoint=liveness,
    )
