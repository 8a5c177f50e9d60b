"""The living part of the harness: Nodes that run Pods, Pods that take time to become
Ready, and the ``metrics.k8s.io`` API the real HPA controller reads.

Without these, Pods stay Pending and the HPA reports ``ScalingActive=False``; with
them, the whole reactive loop floorcast sits in runs for real:

* **kube-scheduler** (the pinned Kubernetes release) binds Pods to Nodes;
* **kwok** manages fake Nodes (heartbeats, a Lease) and the Pod lifecycle through
  Stages written here: a bound Pod turns Running at once, and ``Ready`` only after
  ``pod_ready_delay`` (per Pod overridable with the :data:`READY_DELAY_ANNOTATION`
  annotation) — the start-up and warm-up time floorcast's lead time exists for. kwok
  also serves kubelet-style resource metrics per Node, whose CPU usage is read from
  the Pod annotation :data:`CPU_USAGE_ANNOTATION` (see ``e2e/load.py``, which writes it);
* **metrics-server** scrapes those endpoints and is registered as the
  ``v1beta1.metrics.k8s.io`` APIService through the API server's aggregation layer
  (front-proxy certificates from ``pki.py``), so the HPA controller reads real
  PodMetrics through the API server, exactly as in a cluster.

Simplifications, each a deliberate choice: every Node reports 127.0.0.1 as its
InternalIP (kwok serves them all on one port, a path per Node); metrics-server is
reached through an ExternalName Service, and the APIService skips TLS verification
(its serving certificate is self-signed; the API server's client side is what
matters here).
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import yaml
from kubernetes import client as k8s

from e2e.controlplane import build, pki
from e2e.controlplane.process import (
    ControlPlaneError,
    HttpProbe,
    free_ports,
    insecure_context,
    wait_for,
)

if TYPE_CHECKING:
    from e2e.controlplane.runner import ControlPlane

#: CPU usage a Pod reports (a Kubernetes quantity, e.g. ``"250m"``); the load driver
#: writes it. A Pod without it uses :data:`IDLE_CPU`.
CPU_USAGE_ANNOTATION = "e2e.floorcast.dev/cpu-usage"
#: Per-Pod override of the time from Running to Ready (a Go duration, ``"20s"``).
READY_DELAY_ANNOTATION = "e2e.floorcast.dev/ready-delay"
IDLE_CPU = "10m"
KWOK_NODE_ANNOTATION = "kwok.x-k8s.io/node"
METRICS_APISERVICE = "v1beta1.metrics.k8s.io"


@dataclass(frozen=True)
class LivingSettings:
    """How the living cluster behaves; defaults are a small but real cluster."""

    nodes: int = 4
    node_cpu: int = 32
    node_memory: str = "128Gi"
    node_pods: int = 110
    pod_ready_delay: float = 30.0  # seconds from Running to Ready
    #: metrics-server's scrape interval; 15 s is its documented default.
    metric_resolution: str = "15s"


def _stage(name: str, kind: str, match: list[dict], next_: dict, **extra: object) -> dict:
    """One kwok Stage: when a ``kind`` object matches ``match``, apply ``next_``."""
    spec = {"resourceRef": {"apiGroup": "v1", "kind": kind},
            "selector": {"matchExpressions": match}, "next": next_, **extra}  # fmt: skip
    return {"apiVersion": "kwok.x-k8s.io/v1alpha1", "kind": "Stage",
            "metadata": {"name": name}, "spec": spec}  # fmt: skip


def _pod_stages(ready_delay_ms: int) -> list[dict]:
    alive = {"key": ".metadata.deletionTimestamp", "operator": "DoesNotExist"}
    not_ready = {"key": '.status.conditions.[] | select( .type == "Ready" ) | .status',
                 "operator": "In", "values": ["False"]}  # fmt: skip
    delay = {
        "durationMilliseconds": ready_delay_ms,
        "durationFrom": {"expressionFrom": f'.metadata.annotations["{READY_DELAY_ANNOTATION}"]'},
    }
    # The Pod keeps the IPs it got when it started (status.podIPs is immutable).
    ready_status = _STATUS_TEMPLATE.replace("{{READY}}", "True").split("{{ $hostIPs")[0]
    return [
        _stage("floorcast-pod-running", "Pod",
               [alive, {"key": ".status.podIP", "operator": "DoesNotExist"}],
               {"statusTemplate": _STATUS_TEMPLATE.replace("{{READY}}", "False")}),
        _stage("floorcast-pod-ready", "Pod",
               [alive, {"key": ".status.podIP", "operator": "Exists"}, not_ready],
               {"statusTemplate": ready_status + "phase: Running\n"}, delay=delay),
        _stage("floorcast-pod-delete", "Pod",
               [{"key": ".metadata.deletionTimestamp", "operator": "Exists"}],
               {"delete": True}),
    ]  # fmt: skip


# The Pod's status while it runs; {{READY}} is False while it warms up, then True.
# startTime and startedAt keep the instant the Pod started running, as a kubelet does.
_STATUS_TEMPLATE = """\
{{ $now := Now }}
{{ $start := or .status.startTime $now }}
{{ $ready := "{{READY}}" }}
{{ $readyAt := $now }}
{{ if eq $ready "False" }}{{ $readyAt = $start }}{{ end }}
conditions:
- lastTransitionTime: {{ $start | Quote }}
  status: "True"
  type: Initialized
- lastTransitionTime: {{ $readyAt | Quote }}
  status: {{ $ready | Quote }}
  type: Ready
- lastTransitionTime: {{ $readyAt | Quote }}
  status: {{ $ready | Quote }}
  type: ContainersReady
- lastTransitionTime: {{ $start | Quote }}
  status: "True"
  type: PodScheduled
containerStatuses:
{{ range .spec.containers }}
- image: {{ .image | Quote }}
  name: {{ .name | Quote }}
  ready: {{ eq $ready "True" }}
  started: true
  restartCount: 0
  state:
    running:
      startedAt: {{ $start | Quote }}
{{ end }}
{{ $hostIPs := NodeIPsWith .spec.nodeName }}
{{ with $hostIPs }}
hostIP: {{ index . 0 | Quote }}
hostIPs:
{{ range . }}
- ip: {{ . | Quote }}
{{ end }}
{{ end }}
{{POD_IPS}}
{{ with $podIPs }}
podIP: {{ index . 0 | Quote }}
podIPs:
{{ range . }}
- ip: {{ . | Quote }}
{{ end }}
{{ end }}
phase: Running
startTime: {{ $start | Quote }}
""".replace(
    "{{POD_IPS}}",
    "{{ $podIPs := PodIPsWith .spec.nodeName ( or .spec.hostNetwork false ) "
    '( or .metadata.uid "" ) ( or .metadata.name "" ) ( or .metadata.namespace "" ) }}',
)


def _node_stages() -> list[dict]:
    """kwok's own node-initialize and heartbeat behaviour, kept minimal."""
    conditions = """\
{{ $now := Now }}
{{ $lastTransitionTime := or .metadata.creationTimestamp $now }}
conditions:
{{ range NodeConditions }}
- lastHeartbeatTime: {{ $now | Quote }}
  lastTransitionTime: {{ $lastTransitionTime | Quote }}
  message: {{ .message | Quote }}
  reason: {{ .reason | Quote }}
  status: {{ .status | Quote }}
  type: {{ .type | Quote }}
{{ end }}
"""
    init = conditions + """\
addresses:
- address: {{ NodeIP | Quote }}
  type: InternalIP
- address: {{ .metadata.name | Quote }}
  type: Hostname
daemonEndpoints:
  kubeletEndpoint:
    Port: {{ NodePort }}
allocatable:
{{ YAML .status.allocatable 1 }}
capacity:
{{ YAML .status.capacity 1 }}
nodeInfo:
  architecture: amd64
  operatingSystem: linux
  kubeletVersion: {{ printf "kwok-%s" Version }}
  kubeProxyVersion: {{ printf "kwok-%s" Version }}
  containerRuntimeVersion: {{ printf "kwok-%s" Version }}
  kernelVersion: {{ printf "kwok-%s" Version }}
  bootID: ""
  machineID: ""
  osImage: ""
  systemUUID: ""
phase: Running
"""
    not_ready = {
        "key": '.status.conditions.[] | select( .type == "Ready" ) | .status',
        "operator": "NotIn",
        "values": ["True"],
    }
    is_ready = dict(not_ready, operator="In")
    return [
        _stage("floorcast-node-initialize", "Node", [not_ready], {"statusTemplate": init}),
        _stage("floorcast-node-heartbeat", "Node", [is_ready], {"statusTemplate": conditions},
               delay={"durationMilliseconds": 20000, "jitterDurationMilliseconds": 5000},
               immediateNextStage=True),
    ]  # fmt: skip


def _metrics_objects() -> list[dict]:
    """kubelet's resource-metrics endpoint (what metrics-server scrapes), per Node, and
    the CPU usage each Pod reports: its annotation, else an idle trickle."""
    by = {"labels": [{"name": "namespace", "value": "pod.metadata.namespace"},
                     {"name": "pod", "value": "pod.metadata.name"}]}  # fmt: skip
    per_container = {"labels": [{"name": "container", "value": "container.name"}, *by["labels"]]}
    metrics = [
        {"name": "scrape_error", "dimension": "node", "kind": "gauge", "value": "0",
         "help": "1 if there was an error while getting metrics from the node"},
        {"name": "container_start_time_seconds", "dimension": "container", "kind": "gauge",
         "value": "pod.SinceSecond()", "help": "Start time of the container", **per_container},
        {"name": "container_cpu_usage_seconds_total", "dimension": "container",
         "kind": "counter", "value": 'pod.CumulativeUsage("cpu", container.name)',
         "help": "Cumulative cpu time", **per_container},
        {"name": "container_memory_working_set_bytes", "dimension": "container",
         "kind": "gauge", "value": 'pod.Usage("memory", container.name)',
         "help": "Working set", **per_container},
        {"name": "pod_cpu_usage_seconds_total", "dimension": "pod", "kind": "counter",
         "value": 'pod.CumulativeUsage("cpu")', "help": "Cumulative cpu time", **by},
        {"name": "pod_memory_working_set_bytes", "dimension": "pod", "kind": "gauge",
         "value": 'pod.Usage("memory")', "help": "Working set", **by},
        {"name": "node_cpu_usage_seconds_total", "dimension": "node", "kind": "counter",
         "value": 'node.CumulativeUsage("cpu")', "help": "Cumulative cpu time"},
        {"name": "node_memory_working_set_bytes", "dimension": "node", "kind": "gauge",
         "value": 'node.Usage("memory")', "help": "Working set"},
    ]  # fmt: skip
    cpu = (
        f'"{CPU_USAGE_ANNOTATION}" in pod.metadata.annotations'
        f' ? Quantity(pod.metadata.annotations["{CPU_USAGE_ANNOTATION}"])'
        f' : Quantity("{IDLE_CPU}")'
    )
    return [
        {
            "apiVersion": "kwok.x-k8s.io/v1alpha1",
            "kind": "Metric",
            "metadata": {"name": "floorcast-resource-metrics"},
            "spec": {"path": "/metrics/nodes/{nodeName}/metrics/resource", "metrics": metrics},
        },
        {
            "apiVersion": "kwok.x-k8s.io/v1alpha1",
            "kind": "ClusterResourceUsage",
            "metadata": {"name": "floorcast-cpu-from-annotation"},
            "spec": {
                "usages": [
                    {
                        "usage": {
                            "cpu": {"expression": cpu},
                            "memory": {"expression": 'Quantity("64Mi")'},
                        }
                    }
                ]
            },
        },
    ]


def write_kwok_config(path: Path, settings: LivingSettings) -> Path:
    """kwok's configuration: which Nodes it manages, the Stages and the metrics."""
    conf = {
        "apiVersion": "config.kwok.x-k8s.io/v1alpha1",
        "kind": "KwokConfiguration",
        "options": {
            "manageAllNodes": False,
            "manageNodesWithAnnotationSelector": f"{KWOK_NODE_ANNOTATION}=fake",
            "cidr": "10.244.0.0/16",
            "nodeLeaseDurationSeconds": 40,
            "nodeLeaseParallelism": 4,
            "podPlayStageParallelism": 4,
            "nodePlayStageParallelism": 4,
        },
    }
    docs = [conf, *_node_stages(), *_pod_stages(int(settings.pod_ready_delay * 1000)),
            *_metrics_objects()]  # fmt: skip
    path.write_text(yaml.safe_dump_all(docs, sort_keys=False))
    return path


def node_manifest(name: str, settings: LivingSettings) -> dict:
    resources = {
        "cpu": str(settings.node_cpu),
        "memory": settings.node_memory,
        "pods": str(settings.node_pods),
    }
    return {
        "apiVersion": "v1",
        "kind": "Node",
        "metadata": {
            "name": name,
            "annotations": {
                KWOK_NODE_ANNOTATION: "fake",
                "node.alpha.kubernetes.io/ttl": "0",
                # metrics-server asks for this path instead of /metrics/resource.
                "metrics.k8s.io/resource-metrics-path": f"/metrics/nodes/{name}/metrics/resource",
            },
            "labels": {"kubernetes.io/hostname": name, "kubernetes.io/os": "linux", "type": "kwok"},
        },
        "status": {"allocatable": resources, "capacity": resources},
    }


def metrics_registration(port: int) -> list[dict]:
    """The APIService and its ExternalName Service (no Service network here)."""
    return [
        {
            "apiVersion": "v1",
            "kind": "Service",
            "metadata": {"name": "metrics-server", "namespace": "kube-system"},
            "spec": {"type": "ExternalName", "externalName": "127.0.0.1"},
        },
        {
            "apiVersion": "apiregistration.k8s.io/v1",
            "kind": "APIService",
            "metadata": {"name": METRICS_APISERVICE},
            "spec": {
                "group": "metrics.k8s.io",
                "version": "v1beta1",
                "service": {"name": "metrics-server", "namespace": "kube-system", "port": port},
                "insecureSkipTLSVerify": True,
                "groupPriorityMinimum": 100,
                "versionPriority": 100,
            },
        },
    ]


def start(cp: ControlPlane, run: Path, logs: Path, settings: LivingSettings) -> None:
    """Start scheduler, kwok and metrics-server against ``cp`` and wait until a Node
    is Ready and ``metrics.k8s.io`` answers; a component that dies fails fast with
    its log tail."""
    keys = cp.pki
    bins = cp.binaries
    kwok_bin, ms_bin = build.kwok_path(), build.metrics_server_path()
    for b in (kwok_bin, ms_bin):
        if not b.exists():
            raise ControlPlaneError(f"{b} is missing: run `python -m e2e.controlplane build`")
    sched_port, kwok_port, ms_port = free_ports(3)
    admin_kc = str(cp.kubeconfig)
    sched_kc = pki.write_kubeconfig(
        run / "kube-scheduler.kubeconfig",
        pki.kubeconfig_dict(cp.server, keys.ca.cert_pem(), pki.client_cert_user(keys.scheduler)),
    )
    base = [cp.process("etcd"), cp.process("kube-apiserver")]
    sched = cp.add_process(
        "kube-scheduler",
        logs,
        [
            str(bins.kube_scheduler),
            f"--kubeconfig={sched_kc}",
            f"--authentication-kubeconfig={sched_kc}",
            f"--authorization-kubeconfig={sched_kc}",
            "--bind-address=127.0.0.1",
            f"--secure-port={sched_port}",
            "--leader-elect=false",
            "--profiling=false",
            "--v=1",
        ],
    )
    sched.start()
    cp.startup_seconds["kube-scheduler"] = wait_for(
        "kube-scheduler /readyz",
        HttpProbe(f"https://127.0.0.1:{sched_port}/readyz", insecure_context()),
        [*base, sched],
        cp.ready_timeout,
    )
    kwok_conf = write_kwok_config(run / "kwok.yaml", settings)
    kwok = cp.add_process(
        "kwok",
        logs,
        [
            str(kwok_bin),
            f"--kubeconfig={admin_kc}",
            f"--config={kwok_conf}",
            f"--tls-cert-file={keys.apiserver.cert}",
            f"--tls-private-key-file={keys.apiserver.key}",
            "--node-ip=127.0.0.1",
            f"--node-port={kwok_port}",
            f"--server-address=127.0.0.1:{kwok_port}",
            "--node-lease-duration-seconds=40",
            "--v=INFO",
        ],
    )
    kwok.start()
    ms = cp.add_process(
        "metrics-server",
        logs,
        [
            str(ms_bin),
            f"--kubeconfig={admin_kc}",
            f"--authentication-kubeconfig={admin_kc}",
            f"--authorization-kubeconfig={admin_kc}",
            "--bind-address=127.0.0.1",
            f"--secure-port={ms_port}",
            f"--cert-dir={run / 'metrics-server-certs'}",
            "--kubelet-preferred-address-types=InternalIP",
            "--kubelet-use-node-status-port",
            "--kubelet-insecure-tls",
            f"--metric-resolution={settings.metric_resolution}",
            "--v=1",
        ],
    )
    ms.start()
    began = time.monotonic()
    with cp.api_client() as api:
        core = k8s.CoreV1Api(api)
        for i in range(settings.nodes):
            core.create_node(node_manifest(f"kwok-node-{i}", settings))
        objs = metrics_registration(ms_port)
        core.create_namespaced_service("kube-system", objs[0])
        k8s.ApiregistrationV1Api(api).create_api_service(objs[1])
        procs = [*base, sched, kwok, ms]
        wait_for("kwok Nodes Ready", lambda: _nodes_ready(core, settings.nodes), procs,
                 cp.ready_timeout)  # fmt: skip
        cp.startup_seconds["kwok"] = time.monotonic() - began
        wait_for("APIService v1beta1.metrics.k8s.io Available", lambda: _available(api), procs,
                 cp.ready_timeout)  # fmt: skip
        cp.startup_seconds["metrics-server"] = time.monotonic() - began


def _nodes_ready(core: k8s.CoreV1Api, want: int) -> bool:
    ready = 0
    for node in core.list_node().items:
        for c in node.status.conditions or []:
            if c.type == "Ready" and c.status == "True":
                ready += 1
    return ready >= want


def _available(api: k8s.ApiClient) -> bool:
    """The aggregator reached metrics-server (it reports no NodeMetrics until Pods run,
    since a Node's usage is its Pods' sum, so this is the readiness to wait for)."""
    svc = k8s.ApiregistrationV1Api(api).read_api_service(METRICS_APISERVICE)
    return any(c.type == "Available" and c.status == "True" for c in svc.status.conditions or [])
