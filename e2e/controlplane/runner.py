"""Run a real, minimal Kubernetes control plane as local processes.

etcd, kube-apiserver and kube-controller-manager, built by ``build.py``, are enough
for what floorcast's operator touches: the API server (admission, validation of our
CRDs, RBAC, TokenRequest) and the controllers that react to what the operator writes
(an HPA's ``minReplicas`` scales its Deployment, whose ReplicaSet creates Pods).
Without ``living=True`` there is no scheduler and no kubelet, so Pods stay Pending;
with it, ``living.py`` adds kube-scheduler, kwok (Nodes, Pods that become Ready after
a start-up delay, kubelet metrics) and metrics-server, and the HPA scales on metrics.

Everything listens on 127.0.0.1 on random free ports, lives in one temporary run
directory, and is torn down by :meth:`ControlPlane.stop` (also at exit and on
SIGTERM), so parallel runs do not collide and failed runs leave nothing behind.
"""

from __future__ import annotations

import os
import shutil
import ssl
import tempfile
import time
from collections.abc import Sequence
from pathlib import Path

from kubernetes import client as k8s

from e2e.controlplane import build, pki
from e2e.controlplane import living as living_cluster
from e2e.controlplane.cluster import Cluster
from e2e.controlplane.living import LivingSettings
from e2e.controlplane.process import (
    ControlPlaneError,
    HttpProbe,
    ManagedProcess,
    free_ports,
    insecure_context,
    register_cleanup,
    unregister_cleanup,
    wait_for,
)

#: Controllers the operator's behaviour depends on, and the ones a namespace and
#: its Pods need to work at all (service accounts, the root CA ConfigMap, GC of
#: ReplicaSets a Deployment no longer owns, namespace deletion).
DEFAULT_CONTROLLERS = (
    "deployment-controller",
    "replicaset-controller",
    "horizontal-pod-autoscaler-controller",
    "garbage-collector-controller",
    "namespace-controller",
    "serviceaccount-controller",
    "serviceaccount-token-controller",
    "root-ca-certificate-publisher-controller",
)
SERVICE_CIDR = "10.0.0.0/24"
SERVICE_IP = "10.0.0.1"
SA_ISSUER = "https://kubernetes.default.svc.cluster.local"

_PORT_ATTEMPTS = 3

#: Keep the run directory (logs, etcd data) after stop, for post-mortems.
KEEP_ENV = "FLOORCAST_KEEP_RUN_DIR"


class ControlPlane(Cluster):
    """etcd + kube-apiserver + kube-controller-manager on localhost.

    Use as a context manager (``with ControlPlane() as cp: ...``) or call
    :meth:`start` and :meth:`stop`. ``startup_seconds`` records how long each
    component took to become ready.
    """

    is_local = True

    def __init__(
        self,
        binaries: build.Binaries | None = None,
        *,
        controllers: Sequence[str] = DEFAULT_CONTROLLERS,
        hpa_sync_period: str = "2s",
        extra_apiserver_args: Sequence[str] = (),
        extra_controller_manager_args: Sequence[str] = (),
        ready_timeout: float = 120.0,
        keep_run_dir: bool | None = None,
        living: bool | LivingSettings = False,
    ) -> None:
        self._binaries = binaries
        if living is True:
            living = LivingSettings()
        self.living: LivingSettings | None = living or None
        if self.living and "node-lifecycle-controller" not in controllers:
            # The API server taints a new Node not-ready; this controller lifts the
            # taint once kwok reports the Node Ready (and would evict from dead ones).
            controllers = (*controllers, "node-lifecycle-controller")
        self.controllers = tuple(controllers)
        self.hpa_sync_period = hpa_sync_period
        self.extra_apiserver_args = list(extra_apiserver_args)
        self.extra_controller_manager_args = list(extra_controller_manager_args)
        self.ready_timeout = ready_timeout
        self.keep_run_dir = bool(os.environ.get(KEEP_ENV)) if keep_run_dir is None else keep_run_dir
        self.run_dir: Path | None = None
        self.startup_seconds: dict[str, float] = {}
        self._procs: dict[str, ManagedProcess] = {}
        self._cleanup: int | None = None
        self._pki: pki.Pki | None = None
        self.api_port = self.kcm_port = 0
        self.etcd_url = ""
        super().__init__(Path("/nonexistent/kubeconfig"), "")

    # ----------------------------------------------------------------- lifecycle

    def start(self) -> ControlPlane:
        """Start all components and wait until the API server is ready; returns self."""
        if self._procs:
            raise ControlPlaneError("control plane already started")
        began = time.monotonic()
        bins = self._binaries or build.ensure_built()
        self._binaries = bins
        if self.living:
            build.ensure_kwok()
            build.ensure_metrics_server()
        for attempt in range(1, _PORT_ATTEMPTS + 1):
            self.run_dir = Path(tempfile.mkdtemp(prefix="floorcast-cp-"))
            self._cleanup = register_cleanup(self.stop)
            try:
                self._start(bins, self.run_dir)
                break
            except ControlPlaneError as exc:
                self.stop()
                # Ports are picked free, then bound by the components a moment later;
                # a parallel run can take one in between. Only that is worth a retry.
                if "address already in use" not in str(exc) or attempt == _PORT_ATTEMPTS:
                    raise
                self._procs = {}
            except BaseException:
                self.stop()
                raise
        self.startup_seconds["total"] = time.monotonic() - began
        return self

    def _start(self, bins: build.Binaries, run: Path) -> None:
        logs = run / "logs"
        logs.mkdir()
        etcd_client, etcd_peer, api_port, kcm_port = free_ports(4)
        self.api_port, self.kcm_port = api_port, kcm_port
        self.etcd_url = f"http://127.0.0.1:{etcd_client}"
        self.server = f"https://127.0.0.1:{api_port}"

        self._pki = keys = pki.generate(run / "pki", service_ip=SERVICE_IP)
        self.kubeconfig = pki.write_kubeconfig(
            run / "admin.kubeconfig",
            pki.kubeconfig_dict(self.server, keys.ca.cert_pem(), pki.client_cert_user(keys.admin)),
        )
        kcm_kubeconfig = pki.write_kubeconfig(
            run / "kube-controller-manager.kubeconfig",
            pki.kubeconfig_dict(
                self.server, keys.ca.cert_pem(), pki.client_cert_user(keys.controller_manager)
            ),
        )

        etcd = self._add(
            "etcd",
            logs,
            [
                str(bins.etcd),
                "--name=floorcast-e2e",
                f"--data-dir={run / 'etcd-data'}",
                f"--listen-client-urls={self.etcd_url}",
                f"--advertise-client-urls={self.etcd_url}",
                f"--listen-peer-urls=http://127.0.0.1:{etcd_peer}",
                f"--initial-advertise-peer-urls=http://127.0.0.1:{etcd_peer}",
                f"--initial-cluster=floorcast-e2e=http://127.0.0.1:{etcd_peer}",
                "--unsafe-no-fsync",  # throw-away data: durability only costs time
                "--log-level=warn",
            ],
        )
        etcd.start()
        self.startup_seconds["etcd"] = wait_for(
            "etcd /health", HttpProbe(f"{self.etcd_url}/health"), [etcd], 30
        )

        self._add(
            "kube-apiserver",
            logs,
            [
                str(bins.kube_apiserver),
                f"--etcd-servers={self.etcd_url}",
                "--bind-address=127.0.0.1",
                "--advertise-address=127.0.0.1",
                # The endpoint reconciler refuses a loopback address for the
                # `kubernetes` Service's endpoints; nothing here routes to it anyway.
                "--endpoint-reconciler-type=none",
                f"--secure-port={api_port}",
                f"--cert-dir={run / 'apiserver-certs'}",
                f"--tls-cert-file={keys.apiserver.cert}",
                f"--tls-private-key-file={keys.apiserver.key}",
                f"--client-ca-file={keys.ca.cert}",
                f"--service-account-issuer={SA_ISSUER}",
                f"--service-account-key-file={keys.sa_public_key}",
                f"--service-account-signing-key-file={keys.sa_private_key}",
                f"--service-cluster-ip-range={SERVICE_CIDR}",
                # The aggregation layer (metrics.k8s.io is served by metrics-server):
                # the API server proxies with the front-proxy client certificate and
                # passes the caller's identity in these headers.
                f"--requestheader-client-ca-file={keys.front_proxy_ca.cert}",
                f"--requestheader-allowed-names={pki.FRONT_PROXY_CLIENT}",
                "--requestheader-username-headers=X-Remote-User",
                "--requestheader-group-headers=X-Remote-Group",
                "--requestheader-extra-headers-prefix=X-Remote-Extra-",
                f"--proxy-client-cert-file={keys.front_proxy_client.cert}",
                f"--proxy-client-key-file={keys.front_proxy_client.key}",
                "--authorization-mode=Node,RBAC",
                "--allow-privileged=true",
                # Without these, a stop with clients watching (the controller-manager,
                # an operator) waits ~60 s for watch connections that never go idle.
                # With them: 429 + Retry-After while draining, watches closed, ~2 s.
                "--shutdown-send-retry-after=true",
                "--shutdown-watch-termination-grace-period=2s",
                "--profiling=false",
                "--v=1",
                *self.extra_apiserver_args,
            ],
        )
        self._start_apiserver()

        kcm = self._add(
            "kube-controller-manager",
            logs,
            [
                str(bins.kube_controller_manager),
                f"--kubeconfig={kcm_kubeconfig}",
                # No --authentication/authorization-kubeconfig: delegated auth needs the
                # front-proxy CA, which this API server has no use for. /healthz is
                # always allowed, and that is all we ask of this port.
                "--bind-address=127.0.0.1",
                f"--secure-port={kcm_port}",
                f"--cert-dir={run / 'kcm-certs'}",
                "--leader-elect=false",  # a restarted API server must not make it exit
                f"--controllers={','.join(self.controllers)}",
                "--use-service-account-credentials=false",
                f"--root-ca-file={keys.ca.cert}",
                f"--service-account-private-key-file={keys.sa_private_key}",
                f"--horizontal-pod-autoscaler-sync-period={self.hpa_sync_period}",
                "--cluster-name=floorcast-e2e",
                "--profiling=false",
                "--v=2",
                *self.extra_controller_manager_args,
            ],
        )
        kcm.start()
        self.startup_seconds["kube-controller-manager"] = wait_for(
            "kube-controller-manager /healthz",
            HttpProbe(f"https://127.0.0.1:{kcm_port}/healthz", insecure_context()),
            [self._procs["etcd"], self._procs["kube-apiserver"], kcm],
            self.ready_timeout,
        )
        if self.living:
            living_cluster.start(self, run, logs, self.living)

    @property
    def pki(self) -> pki.Pki:
        if self._pki is None:
            raise ControlPlaneError("control plane not started")
        return self._pki

    @property
    def binaries(self) -> build.Binaries:
        return self._binaries or build.binaries()

    def add_process(self, name: str, logs: Path, argv: list[str]) -> ManagedProcess:
        """Register one more component (started by the caller, stopped with the rest)."""
        return self._add(name, logs, argv)

    def _add(self, name: str, logs: Path, argv: list[str]) -> ManagedProcess:
        proc = ManagedProcess(name, argv, logs / f"{name}.log")
        self._procs[name] = proc
        return proc

    def _start_apiserver(self) -> None:
        api = self._procs["kube-apiserver"]
        api.start()
        self.startup_seconds["kube-apiserver"] = wait_for(
            "kube-apiserver /readyz",
            HttpProbe(f"{self.server}/readyz?verbose", self._admin_context()),
            [self._procs["etcd"], api],
            self.ready_timeout,
        )

    def _admin_context(self) -> ssl.SSLContext:
        assert self._pki is not None
        ctx = ssl.create_default_context(cafile=str(self._pki.ca.cert))
        ctx.load_cert_chain(str(self._pki.admin.cert), str(self._pki.admin.key))
        return ctx

    def restart_apiserver(self, downtime: float = 0.0) -> None:
        """Stop kube-apiserver and start it again on the same port, keys and etcd data.

        Clients see connection errors while it is down (``downtime`` seconds plus
        start-up); this is what an operator must survive during an upgrade.
        """
        api = self._procs.get("kube-apiserver")
        if api is None:
            raise ControlPlaneError("control plane not started")
        api.stop()
        if downtime:
            time.sleep(downtime)
        self._start_apiserver()

    def stop(self) -> None:
        """Stop components in reverse start order and remove the run directory.

        Idempotent and safe to call after a failed start.
        """
        for proc in reversed(list(self._procs.values())):
            proc.stop()
        if self._cleanup is not None:
            unregister_cleanup(self._cleanup)
            self._cleanup = None
        if self.run_dir is not None and not self.keep_run_dir:
            shutil.rmtree(self.run_dir, ignore_errors=True)

    def __enter__(self) -> ControlPlane:
        if not self._procs:
            self.start()
        return self

    # ----------------------------------------------------------------- access

    def check_alive(self) -> None:
        """Raise, with its log tail, if any component has exited."""
        for name, proc in self._procs.items():
            if not proc.alive():
                raise ControlPlaneError(
                    proc.describe_failure(f"{name} exited with code {proc.returncode()}")
                )

    def pids(self) -> dict[str, int]:
        """Current pid of each started component (for leak checks)."""
        return {n: p.pid for n, p in self._procs.items() if p.pid is not None}

    def process(self, name: str) -> ManagedProcess:
        """The component ``etcd``, ``kube-apiserver`` or ``kube-controller-manager``."""
        return self._procs[name]

    def log_tail(self, name: str, lines: int = 40) -> str:
        return self._procs[name].tail(lines)

    def api_client(self) -> k8s.ApiClient:
        """A new admin ApiClient using the on-disk client certificate."""
        if self._pki is None:
            raise ControlPlaneError("control plane not started")
        cfg = k8s.Configuration()
        cfg.host = self.server
        cfg.ssl_ca_cert = str(self._pki.ca.cert)
        cfg.cert_file = str(self._pki.admin.cert)
        cfg.key_file = str(self._pki.admin.key)
        return k8s.ApiClient(cfg)

    def kubectl_binary(self) -> str:
        bins = self._binaries or build.binaries()
        return str(bins.kubectl)
