"""Build the Kubernetes control-plane binaries the e2e suite runs, once, into a cache.

The suite needs no container engine: the Go module proxy serves Kubernetes', etcd's,
helm's, kwok's and metrics-server's modules, and their commands build with
`go build`; this module pins them (``modules/*/go.mod`` and ``go.sum``) and builds them into
``$FLOORCAST_CACHE`` (default ``${XDG_CACHE_HOME:-~/.cache}/floorcast``)
``/controlplane/<kubernetes version>/``. A build runs only when a binary is missing
and under a file lock, so parallel test sessions never build twice.
"""

from __future__ import annotations

import datetime as _dt
import fcntl
import os
import shutil
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path

KUBERNETES_VERSION = "v1.37.2"
ETCD_VERSION = "v3.7.3"
MODULES = Path(__file__).resolve().parent / "modules"

KUBE_COMMANDS = ("kube-apiserver", "kube-controller-manager", "kube-scheduler", "kubectl")
HELM_VERSION = "v3.22.0"
# The living cluster: fake Nodes and Pod lifecycle, and the metrics.k8s.io API.
KWOK_VERSION = "v0.8.0"
METRICS_SERVER_VERSION = "v0.8.0"


@dataclass(frozen=True)
class Binaries:
    """Paths of the built control-plane commands."""

    etcd: Path
    kube_apiserver: Path
    kube_controller_manager: Path
    kube_scheduler: Path
    kubectl: Path

    def all(self) -> list[Path]:
        return [
            self.etcd,
            self.kube_apiserver,
            self.kube_controller_manager,
            self.kube_scheduler,
            self.kubectl,
        ]


def cache_root() -> Path:
    """The cache folder; outside the repo so a fresh clone reuses a warm build."""
    if os.environ.get("FLOORCAST_CACHE"):
        return Path(os.environ["FLOORCAST_CACHE"])
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "floorcast"


def bin_dir() -> Path:
    return cache_root() / "controlplane" / KUBERNETES_VERSION


def binaries() -> Binaries:
    d = bin_dir()
    return Binaries(
        etcd=d / "etcd",
        kube_apiserver=d / "kube-apiserver",
        kube_controller_manager=d / "kube-controller-manager",
        kube_scheduler=d / "kube-scheduler",
        kubectl=d / "kubectl",
    )


def _version_ldflags() -> str:
    """The -X flags Kubernetes' own build sets, so `--version` and discovery are real.

    The API server derives its emulation/compatibility version from gitVersion; an
    unset version (v0.0.0-master) would make it behave unlike a released server.
    """
    major, minor = KUBERNETES_VERSION.lstrip("v").split(".")[:2]
    now = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    values = {
        "gitVersion": KUBERNETES_VERSION,
        "gitMajor": major,
        "gitMinor": minor,
        "gitTreeState": "clean",
        "gitCommit": "0000000000000000000000000000000000000000",
        "buildDate": now,
    }
    flags = ["-s", "-w"]
    for pkg in ("k8s.io/component-base/version", "k8s.io/client-go/pkg/version"):
        flags += [f"-X {pkg}.{k}={v}" for k, v in values.items()]
    return " ".join(flags)


def _log(msg: str) -> None:
    print(f"[controlplane] {msg}", file=sys.stderr, flush=True)


def _go_build(module: Path, out: Path, packages: list[str], ldflags: str) -> None:
    env = dict(os.environ)
    env.setdefault("CGO_ENABLED", "0")
    env["GOFLAGS"] = "-mod=readonly -buildvcs=false"
    cmd = ["go", "build", "-trimpath", "-ldflags", ldflags, "-o", str(out), *packages]
    _log(f"go build {' '.join(packages)} (in {module.name}/)")
    started = time.monotonic()
    proc = subprocess.Popen(cmd, cwd=module, env=env)
    # A cold build takes many minutes on 2 cores; print a heartbeat so nobody (and no
    # CI log watchdog) mistakes it for a hang.
    while proc.poll() is None:
        time.sleep(1)
        elapsed = int(time.monotonic() - started)
        if elapsed and elapsed % 60 == 0:
            _log(f"  still building {module.name} … {elapsed // 60} min")
    if proc.returncode != 0:
        raise RuntimeError(f"go build in {module} failed with exit code {proc.returncode}")
    _log(f"  done in {time.monotonic() - started:.0f} s")


def ensure_built() -> Binaries:
    """Return the binaries, building whatever is missing (under a lock)."""
    bins = binaries()
    if all(p.exists() for p in bins.all()):
        return bins
    if shutil.which("go") is None:
        raise RuntimeError(
            "the Go toolchain is needed to build the control plane: `go` is not on PATH"
        )
    d = bin_dir()
    d.mkdir(parents=True, exist_ok=True)
    with open(d / ".build.lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        if all(p.exists() for p in bins.all()):
            return bins
        _log(
            f"building Kubernetes {KUBERNETES_VERSION} and etcd {ETCD_VERSION} into {d}; "
            "a one-time cold build takes about 20-40 minutes on 2 cores"
        )
        ldflags = _version_ldflags()
        tmp = d / ".partial"
        tmp.mkdir(exist_ok=True)
        if not bins.etcd.exists():
            _go_build(MODULES / "etcd", tmp / "etcd", ["go.etcd.io/etcd/server/v3"], "-s -w")
            os.replace(tmp / "etcd", bins.etcd)
        missing = [c for c in KUBE_COMMANDS if not (d / c).exists()]
        if missing:
            _go_build(
                MODULES / "kubernetes",
                tmp,
                [f"k8s.io/kubernetes/cmd/{c}" for c in missing],
                ldflags,
            )
            for c in missing:
                os.replace(tmp / c, d / c)
        shutil.rmtree(tmp, ignore_errors=True)
    return bins


@dataclass(frozen=True)
class _Tool:
    name: str
    version: str
    module: str
    package: str
    ldflags: str = "-s -w"


#: Pinned in ``modules/helm``; the version string is stamped in as Helm's own
#: Makefile does, so ``helm version`` and the chart's kubeVersion checks see it.
_HELM = _Tool(
    "helm",
    HELM_VERSION,
    "helm",
    "helm.sh/helm/v3/cmd/helm",
    f"-s -w -X helm.sh/helm/v3/internal/version.version={HELM_VERSION}",
)
_KWOK = _Tool(
    "kwok",
    KWOK_VERSION,
    "kwok",
    "sigs.k8s.io/kwok/cmd/kwok",
    "-s -w",
)
_METRICS_SERVER = _Tool(
    "metrics-server",
    METRICS_SERVER_VERSION,
    "metrics-server",
    "sigs.k8s.io/metrics-server/cmd/metrics-server",
    f"-s -w -X k8s.io/client-go/pkg/version.gitVersion={METRICS_SERVER_VERSION}",
)


def _tool_path(tool: _Tool) -> Path:
    return cache_root() / tool.name / tool.version / tool.name


def _ensure_tool(tool: _Tool) -> Path:
    out = _tool_path(tool)
    if out.exists():
        return out
    if shutil.which("go") is None:
        raise RuntimeError(f"the Go toolchain is needed to build {tool.name}: `go` is not on PATH")
    out.parent.mkdir(parents=True, exist_ok=True)
    with open(out.parent / ".build.lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        if out.exists():
            return out
        _log(f"building {tool.name} {tool.version} into {out.parent}")
        tmp = out.parent / f".partial-{tool.name}"
        _go_build(MODULES / tool.module, tmp, [tool.package], tool.ldflags)
        os.replace(tmp, out)
    return out


def helm_path() -> Path:
    return _tool_path(_HELM)


def ensure_helm() -> Path:
    """The Helm CLI the chart tests run, built (under a lock) if missing."""
    return _ensure_tool(_HELM)


def kwok_path() -> Path:
    return _tool_path(_KWOK)


def metrics_server_path() -> Path:
    return _tool_path(_METRICS_SERVER)


def ensure_kwok() -> Path:
    """kwok runs the living cluster's fake Nodes, Pod lifecycle and kubelet metrics."""
    return _ensure_tool(_KWOK)


def ensure_metrics_server() -> Path:
    """metrics-server serves metrics.k8s.io, the API the real HPA controller reads."""
    return _ensure_tool(_METRICS_SERVER)


def ensure_all() -> list[Path]:
    """Everything the e2e suite runs; what `python -m e2e.controlplane build` calls."""
    return [*ensure_built().all(), ensure_helm(), ensure_kwok(), ensure_metrics_server()]


if __name__ == "__main__":
    for p in ensure_all():
        print(p)
