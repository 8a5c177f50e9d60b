"""The cluster interface the e2e suite uses, whoever runs the cluster.

Tests talk to a :class:`Cluster`: either the harness's own :class:`ControlPlane`
(``runner.py``) or, when ``FLOORCAST_KUBECONFIG`` is set, an existing cluster (kind,
a user's test cluster) wrapped in :class:`ExternalCluster`. Keeping the surface this
small is what lets the same suite run against both.
"""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import yaml
from kubernetes import client as k8s
from kubernetes import config as k8s_config

from e2e.controlplane import build
from e2e.controlplane.process import ControlPlaneError


class Cluster:
    """A reachable cluster plus an admin kubeconfig for it."""

    #: True only for the harness's own control plane (which can be restarted).
    is_local: bool = False

    def __init__(self, kubeconfig: Path, server: str) -> None:
        self.kubeconfig = kubeconfig
        self.server = server

    def api_client(self) -> k8s.ApiClient:
        """A new admin ApiClient (close it, or use it as a context manager)."""
        return k8s_config.new_client_from_config(config_file=str(self.kubeconfig))

    def kubectl_binary(self) -> str:
        """The kubectl to run: the one built with the control plane, else PATH's."""
        built = build.binaries().kubectl
        if built.exists():
            return str(built)
        found = shutil.which("kubectl")
        if not found:
            raise ControlPlaneError("no kubectl: not built yet and not on PATH")
        return found

    def kubectl(
        self,
        *args: str,
        check: bool = True,
        input: str | None = None,
        timeout: float = 120.0,
        kubeconfig: Path | None = None,
    ) -> subprocess.CompletedProcess[str]:
        """Run kubectl against this cluster (as admin unless ``kubeconfig`` says otherwise).

        With ``check`` a non-zero exit raises, with kubectl's stderr in the message,
        so a failing test shows what the API server said rather than just "exit 1".
        """
        cmd = [self.kubectl_binary(), f"--kubeconfig={kubeconfig or self.kubeconfig}", *args]
        res = subprocess.run(
            cmd, input=input, capture_output=True, text=True, timeout=timeout, check=False
        )
        if check and res.returncode != 0:
            raise ControlPlaneError(
                f"kubectl {' '.join(args)} exited {res.returncode}:\n{res.stderr.strip()}"
            )
        return res

    def restart_apiserver(self) -> None:
        raise ControlPlaneError(
            "restart_apiserver() needs the harness's own control plane; this suite runs "
            f"against an external cluster ({self.server})"
        )

    def stop(self) -> None:
        """Nothing to stop: the cluster is not ours."""

    def __enter__(self) -> Cluster:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


def current_cluster_entry(kubeconfig: Path) -> tuple[str, dict[str, object]]:
    """Name and ``cluster`` mapping of the kubeconfig's current context.

    A relative ``certificate-authority`` path is made absolute (kubeconfig paths are
    relative to the file), so the entry can be copied into another kubeconfig.
    """
    data = yaml.safe_load(kubeconfig.read_text()) or {}
    ctx_name = data.get("current-context")
    contexts = {c["name"]: c["context"] for c in data.get("contexts") or []}
    clusters = {c["name"]: c["cluster"] for c in data.get("clusters") or []}
    if ctx_name not in contexts:
        raise ControlPlaneError(f"{kubeconfig}: current-context {ctx_name!r} is not defined")
    name = contexts[ctx_name]["cluster"]
    if name not in clusters:
        raise ControlPlaneError(f"{kubeconfig}: cluster {name!r} is not defined")
    entry = dict(clusters[name])
    ca = entry.get("certificate-authority")
    if isinstance(ca, str) and not Path(ca).is_absolute():
        entry["certificate-authority"] = str((kubeconfig.parent / ca).resolve())
    return name, entry


class ExternalCluster(Cluster):
    """A cluster someone else runs, reached through an existing kubeconfig."""

    def __init__(self, kubeconfig: Path) -> None:
        kubeconfig = kubeconfig.expanduser().resolve()
        if not kubeconfig.is_file():
            raise ControlPlaneError(f"FLOORCAST_KUBECONFIG={kubeconfig} is not a file")
        _, entry = current_cluster_entry(kubeconfig)
        super().__init__(kubeconfig, str(entry.get("server")))
        self.check_reachable()

    def kubectl_binary(self) -> str:
        # Prefer the user's kubectl: it matches their cluster, ours matches ours.
        return shutil.which("kubectl") or super().kubectl_binary()

    def check_reachable(self) -> None:
        """Fail now, with the reason, rather than in every test."""
        try:
            with self.api_client() as api:
                k8s.VersionApi(api).get_code(_request_timeout=15)
        except Exception as exc:
            raise ControlPlaneError(
                f"cannot reach the cluster in {self.kubeconfig} ({self.server}): {exc}"
            ) from exc
