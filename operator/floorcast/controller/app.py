"""Start the operator in-process with the project's settings (what `floorcast run` calls).

kopf runs the process: login, start-up and clean-up, the liveness endpoint and log
format. The watches are floorcast's own informers (controller/informer.py explains
why: kopf's index barrier costs the square of the objects at start-up), started from
kopf's start-up hook; the reconcile workers start once every informer has listed.
kopf itself watches no resource, so it posts nothing and patches nothing.

With ``--leader-elect LEASE`` several replicas may run: each waits on standby (serving
/healthz so its liveness probe passes) until it holds the Lease (controller/leader.py),
and only then starts kopf. A replica that cannot renew exits at once — the pod restarts
as a standby — so two replicas never act together.
"""

from __future__ import annotations

import contextlib
import logging
import os
import socket
import threading
from collections.abc import Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

import kopf
from kubernetes import client as k8s
from kubernetes import config as k8s_config

from floorcast.controller import memory, metrics, watches
from floorcast.controller.connections import bounded_session, connection_limit
from floorcast.controller.leader import Elector, LeaseConfig, keep_leading, wait_for_leadership
from floorcast.controller.reconcile import Runtime
from floorcast.controller.schedule import Periods
from floorcast.controller.settings import Settings
from floorcast.controller.workers import Workers

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
    # The informers' watch streams hold a connection each; the workers, lease renewal
    # and lead-time reads share the rest (controller/connections.py).
    cfg.connection_pool_maxsize = connection_limit(settings)
    return k8s.ApiClient(cfg)


class _Healthz(BaseHTTPRequestHandler):
    def do_GET(self) -> None:  # the stdlib's name
        ok = self.path.split("?")[0] == "/healthz"
        self.send_response(200 if ok else 404)
        self.end_headers()
        self.wfile.write(b"standby\n" if ok else b"")

    def log_message(self, *_: Any) -> None:  # probes every 20 s: no log line each
        pass


@contextlib.contextmanager
def _standby_liveness(port: int | None) -> Iterator[None]:
    """kopf's liveness endpoint only exists once kopf runs; a standby serves its own."""
    if not port:
        yield
        return
    server = ThreadingHTTPServer(("0.0.0.0", port), _Healthz)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield
    finally:
        server.shutdown()
        server.server_close()


def _lease_config(settings: Settings) -> LeaseConfig:
    ns = (settings.lease_namespace or os.environ.get("POD_NAMESPACE")
          or (settings.namespaces[0] if settings.namespaces else "default"))  # fmt: skip
    identity = settings.identity or f"{socket.gethostname()}-{os.getpid()}"
    assert settings.lease_name
    return LeaseConfig(name=settings.lease_name, namespace=ns, identity=identity)


def _acquire(api: k8s.ApiClient, settings: Settings) -> tuple[Elector, threading.Event]:
    """Block on standby until leader; then renew in the background (exit if lost)."""
    e = Elector(api, _lease_config(settings))
    where = f"{e.cfg.namespace}/{e.cfg.name}"

    def standby(holder: str | None) -> None:
        log.info("standby: Lease %s is held by %r; not acting (identity %s)", where, holder,
                 e.cfg.identity)  # fmt: skip

    def lost() -> None:
        log.error("leader election: lost Lease %s (holder %r); exiting so only one replica "
                  "acts", where, e.holder)  # fmt: skip
        logging.shutdown()
        os._exit(1)

    metrics.LEADER.set(0)
    with _standby_liveness(settings.liveness_port):
        wait_for_leadership(e, standby)
    log.info("leader election: acting, Lease %s held by %s", where, e.cfg.identity)
    stop = threading.Event()
    threading.Thread(target=keep_leading, args=(e, stop, lost), daemon=True,
                     name="lease-renew").start()  # fmt: skip
    return e, stop


def run(settings: Settings) -> None:
    if settings.kubeconfig:
        os.environ["KUBECONFIG"] = settings.kubeconfig  # kopf's own login reads it
    trimming = memory.start_trimming()  # see memory.py: steady RSS 326 -> ~180 MiB
    kopf.configure(
        verbose=False,
        log_format=kopf.LogFormat.JSON if settings.log_format == "json" else kopf.LogFormat.FULL,
    )
    logging.getLogger("floorcast").setLevel(logging.INFO)
    # kopf logs every event handler's success at INFO: a line per watch event.
    logging.getLogger("kopf.objects").setLevel(logging.WARNING)
    registry = kopf.OperatorRegistry()
    rt = Runtime(settings=settings, api=api_client(settings), periods=Periods(
        resync=settings.interval_seconds, observe=settings.observe_interval_seconds,
        unwatched=settings.observe_interval_seconds))  # fmt: skip
    workers = Workers(rt, count=settings.workers)
    informers = watches.informers(rt)

    def begin() -> None:
        watches.start(rt, informers)
        workers.start()

    @kopf.on.login(registry=registry)
    async def login(**kwargs: Any) -> kopf.AiohttpSession | None:
        if settings.kubeconfig:
            info = kopf.login_with_kubeconfig(**kwargs)
        else:
            info = kopf.login_with_service_account(**kwargs) or kopf.login_with_kubeconfig(**kwargs)
        return bounded_session(info, connection_limit(settings)) if info else None

    @kopf.on.startup(registry=registry)
    def configure(settings: kopf.OperatorSettings, **_: Any) -> None:
        settings.posting.enabled = False
        # No CRD/namespace watches: fewer connections and no cluster-wide RBAC. The CRD
        # must be installed before the operator starts (the chart does that).
        settings.scanning.disabled = True
        settings.networking.request_timeout = 30
        # Not blocking the hook: the first listings may take a while at 10,000 policies
        # and kopf's liveness endpoint should answer meanwhile.
        threading.Thread(target=begin, daemon=True, name="start-up").start()

    @kopf.on.cleanup(registry=registry)
    def stop_workers(**_: Any) -> None:
        watches.stop(informers)
        workers.stop()

    if settings.metrics_port:
        metrics.serve(settings.metrics_port)
    leading = _acquire(rt.api, settings) if settings.lease_name else None
    metrics.LEADER.set(1)
    liveness = (
        f"http://0.0.0.0:{settings.liveness_port}/healthz" if settings.liveness_port else None
    )
    where = "all namespaces" if settings.all_namespaces else ", ".join(settings.namespaces)
    log.info("floorcast operator starting: %s, resync %gs, observe %gs, dry-run %s", where,
             settings.interval_seconds, settings.observe_interval_seconds,
             settings.dry_run)  # fmt: skip
    try:
        kopf.run(
            registry=registry,
            standalone=True,
            clusterwide=settings.all_namespaces,
            namespaces=list(settings.namespaces),
            liveness_endpoint=liveness,
        )
    finally:
        if trimming is not None:
            trimming.set()
        if leading is not None:
            leading[1].set()
            leading[0].release()
