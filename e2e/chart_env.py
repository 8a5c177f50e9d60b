"""What the chart tests share: the pinned helm binary and rendering helpers.

Helm is built from the Go module proxy into the control-plane cache
(``e2e/controlplane/build.py:ensure_helm``); its config, cache and data folders are
pointed at a temporary folder so the tests never read or write the user's Helm setup.
"""

from __future__ import annotations

import os
import subprocess
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import pytest
import yaml

from e2e.controlplane import build

ROOT = Path(__file__).resolve().parents[1]
CHART = ROOT / "charts" / "floorcast"
INSTALL_DIR = ROOT / "docs" / "install"

# Non-default value sets every structural test runs on, besides the defaults.
VALUE_SETS: dict[str, dict[str, Any]] = {
    "default": {},
    "namespaced": {
        "rbac": {"namespaced": True},
        "watchNamespaces": ["shop", "search"],
        "dryRun": False,
        "urlAllowList": ["forecasts.example.internal"],
        "prometheusUrl": "http://prometheus.monitoring:9090",
        "logFormat": "json",
        "extraLabels": {"team": "capacity"},
    },
    "forecast-sharded": {
        "forecast": {
            "enabled": True,
            "prometheus": "http://prometheus.monitoring:9090",
            "shards": 3,
            "workloads": [
                {"name": "checkout", "namespace": "shop", "query": "sum(rate(req[5m]))"},
                {"name": "search", "namespace": "search", "query": "sum(rate(q[5m]))"},
                {"name": "local", "query": "up"},
            ],
        },
    },
    "scheduling-and-monitor": {
        "serviceMonitor": {"enabled": True, "labels": {"release": "prom"}},
        "nodeSelector": {"kubernetes.io/os": "linux"},
        "tolerations": [{"key": "ops", "operator": "Exists", "effect": "NoSchedule"}],
        "affinity": {"nodeAffinity": {"requiredDuringSchedulingIgnoredDuringExecution": {
            "nodeSelectorTerms": [{"matchExpressions": [
                {"key": "kubernetes.io/arch", "operator": "In", "values": ["amd64"]}]}]}}},
        "resources": {"requests": {"cpu": "100m", "memory": "256Mi"},
                      "limits": {"memory": "1Gi"}},
        "interval": "1m",
        "image": {"tag": "0.1.0-rc1", "pullPolicy": "Always"},
    },
}  # fmt: skip


class Helm:
    """The pinned helm, run with an isolated home."""

    def __init__(self, binary: Path, home: Path) -> None:
        self.binary = binary
        self.env = {
            **os.environ,
            "HELM_CONFIG_HOME": str(home / "config"),
            "HELM_CACHE_HOME": str(home / "cache"),
            "HELM_DATA_HOME": str(home / "data"),
        }
        self.home = home

    def run(self, *args: str, check: bool = True, kubeconfig: Path | None = None,
            timeout: float = 120) -> subprocess.CompletedProcess[str]:  # fmt: skip
        cmd = [str(self.binary), *args]
        if kubeconfig:
            cmd.append(f"--kubeconfig={kubeconfig}")
        res = subprocess.run(cmd, capture_output=True, text=True, env=self.env, timeout=timeout)
        if check and res.returncode != 0:
            raise AssertionError(f"helm {' '.join(args)} exited {res.returncode}:\n{res.stderr}")
        return res

    def values_file(self, values: dict[str, Any], name: str = "values") -> Path:
        path = self.home / f"{name}.yaml"
        path.write_text(yaml.safe_dump(values))
        return path

    def template(self, values: dict[str, Any] | None = None, *, release: str = "floorcast",
                 namespace: str = "floorcast", extra: Iterable[str] = ()) -> str:  # fmt: skip
        args = ["template", release, str(CHART), "--namespace", namespace, *extra]
        if values:
            args += ["-f", str(self.values_file(values))]
        return self.run(*args).stdout


def docs(rendered: str) -> list[dict[str, Any]]:
    return [d for d in yaml.safe_load_all(rendered) if d]


def by_kind(rendered: str, kind: str) -> list[dict[str, Any]]:
    return [d for d in docs(rendered) if d["kind"] == kind]


@pytest.fixture(scope="session")
def helm(tmp_path_factory: pytest.TempPathFactory) -> Helm:
    return Helm(build.ensure_helm(), tmp_path_factory.mktemp("helm-home"))
