"""Benchmark: one `floorcast run` process managing N policies on the real control plane.

Per policy: a Deployment, an HPA (baseline minReplicas 2), a labelled forecast
ConfigMap (flat load 1.5: floor = baseline) and an Enforce policy. Reports:

* set-up: how long creating the 4 × N objects and the first full reconcile took
  (target at 10,000 policies: all Ready within 120 s);
* reconcile latency after a forecast ConfigMap change (p50/p95 over ``--changes``
  ConfigMaps, changed one every ``--gap`` seconds): from the ConfigMap update's
  response to the moment an HPA watch sees that HPA's minReplicas become 7 (target
  p95 ≤ 1 s);
* API writes per minute and reconciles per second when nothing changes (targets 0 and
  ≤ 20 at 10,000), over a window inside the first resync cycle (``--idle-after``), so
  the resyncs are in it;
* operator RSS from /proc (VmRSS now, VmHWM peak; target ≤ 600 MiB at 10,000).

Writes are counted with the API server's own ``apiserver_request_total`` (scraped from
/metrics with the admin client before and after the idle window), restricted to what
the operator's RBAC lets it write besides Events: policies (any subresource) and HPAs
(main resource only; the HPA controller writes ``/status``, never the main resource,
and nothing else here patches HPAs). Events are counted by listing Events whose source
component is ``floorcast`` (the API server's counter cannot tell their writers apart).

Targets from the operator issue (no outside source). Run:
    .venv/bin/python tests/perf/bench_operator.py [--policies 500] [--changes 50]
"""

from __future__ import annotations

import argparse
import json
import os
import re
import signal
import socket
import statistics
import subprocess
import sys
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pandas as pd
from kubernetes import client as k8s
from kubernetes import watch

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
from e2e.controlplane.runner import ControlPlane  # noqa: E402

CRD = ROOT / "crds" / "forecastscalingpolicies.floorcast.dev.yaml"
NS, BASELINE = "bench", 2
GROUP, VERSION, PLURAL = "floorcast.dev", "v1alpha1", "forecastscalingpolicies"
WRITES = ("POST", "PUT", "PATCH", "DELETE", "APPLY")


def forecast(peak: float) -> str:
    """1-minute points, 2 h; load 1.5 (2 replicas) and ``peak`` from now+10m for 3 min."""
    now = pd.Timestamp.now(tz="UTC").floor("min")
    pts = [{"t": (now + pd.Timedelta(minutes=i)).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "value": peak if 10 <= i < 13 else 1.5} for i in range(-10, 110)]  # fmt: skip
    gen = now.strftime("%Y-%m-%dT%H:%M:%SZ")
    return json.dumps({"unit": "cores", "step": "1m", "generated": gen, "points": pts})


def objects(i: int, text: str) -> tuple[dict, dict, dict, dict]:
    name = f"w{i:04d}"
    labels = {"app": name}
    dep = {"apiVersion": "apps/v1", "kind": "Deployment", "metadata": {"name": name},
           "spec": {"replicas": BASELINE, "selector": {"matchLabels": labels},
                    "template": {"metadata": {"labels": labels}, "spec": {"containers": [
                        {"name": "app", "image": "registry.k8s.io/pause:3.10"}]}}}}  # fmt: skip
    hpa = {"apiVersion": "autoscaling/v2", "kind": "HorizontalPodAutoscaler",
           "metadata": {"name": name},
           "spec": {"scaleTargetRef": {"apiVersion": "apps/v1", "kind": "Deployment",
                                       "name": name},
                    "minReplicas": BASELINE, "maxReplicas": 10,
                    "metrics": [{"type": "Resource", "resource": {"name": "cpu", "target": {
                        "type": "Utilization", "averageUtilization": 50}}}]}}  # fmt: skip
    cm = {"metadata": {"name": f"{name}-fc", "labels": {"floorcast.dev/forecast": "true"}},
          "data": {"f.json": text}}  # fmt: skip
    pol = {"apiVersion": f"{GROUP}/{VERSION}", "kind": "ForecastScalingPolicy",
           "metadata": {"name": name},
           "spec": {"targetRef": {"name": name},
                    "forecast": {"configMapRef": {"name": f"{name}-fc", "key": "f.json"}},
                    "capacity": {"perReplica": 1}, "leadTime": "15m", "holdTime": "1m",
                    "headroom": 0, "mode": "Enforce"}}  # fmt: skip
    return dep, hpa, cm, pol


def create_all(api: k8s.ApiClient, n: int) -> float:
    apps, auto = k8s.AppsV1Api(api), k8s.AutoscalingV2Api(api)
    core, custom = k8s.CoreV1Api(api), k8s.CustomObjectsApi(api)
    text = forecast(1.5)

    def one(i: int) -> None:
        dep, hpa, cm, pol = objects(i, text)
        apps.create_namespaced_deployment(NS, dep)
        auto.create_namespaced_horizontal_pod_autoscaler(NS, hpa)
        core.create_namespaced_config_map(NS, cm)
        custom.create_namespaced_custom_object(GROUP, VERSION, NS, PLURAL, pol)

    began = time.monotonic()
    with ThreadPoolExecutor(8) as pool:
        list(pool.map(one, range(n)))
    return time.monotonic() - began


def ready_count(api: k8s.ApiClient) -> int:
    """Policies whose status says Ready for their current generation."""
    items = k8s.CustomObjectsApi(api).list_namespaced_custom_object(GROUP, VERSION, NS,
                                                                   PLURAL)["items"]  # fmt: skip
    done = 0
    for p in items:
        st = p.get("status") or {}
        ready = any(c["type"] == "Ready" and c["status"] == "True"
                    for c in st.get("conditions") or [])  # fmt: skip
        done += ready and st.get("observedGeneration") == p["metadata"].get("generation")
    return done


def reconciles(port: int) -> float:
    """floorcast_reconciles_total from the operator's own /metrics."""
    import urllib.request

    text = urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=5).read().decode()
    for line in text.splitlines():
        if line.startswith("floorcast_reconciles_total "):
            return float(line.split()[1])
    return 0.0


QUIET_S = 15.0


def quiesce(cp: ControlPlane, limit: float = 900) -> float:
    """Wait until the operator makes no write (apiserver_writes) for QUIET_S seconds.

    Ready is not quite the end of start-up writes: the last few status patches and
    their Events may still be in flight (when kopf still watched, it made a second pass
    of annotation patches ending about 90 s after all 2000 policies were Ready). The
    idle window starts only once the API server has seen the operator go quiet."""
    began = time.monotonic()
    last, _ = apiserver_writes(cp)
    since = time.monotonic()
    while time.monotonic() - began < limit:
        time.sleep(3)
        now, _ = apiserver_writes(cp)
        if delta(now, last):
            last, since = now, time.monotonic()
        elif time.monotonic() - since >= QUIET_S:
            return time.monotonic() - began
    raise SystemExit(f"the operator was still writing after {limit:.0f}s")


def apiserver_writes(cp: ControlPlane) -> tuple[dict[str, float], float]:
    """(operator-writable writes except Events by "verb resource/subresource", all writes)."""
    text = cp.kubectl("get", "--raw", "/metrics").stdout
    ours: dict[str, float] = {}
    total = 0.0
    for line in text.splitlines():
        if not line.startswith("apiserver_request_total{"):
            continue
        labels = dict(re.findall(r'(\w+)="([^"]*)"', line))
        if labels.get("verb") not in WRITES:
            continue
        value = float(line.rsplit(" ", 1)[1])
        total += value
        res, sub = labels.get("resource"), labels.get("subresource", "")
        if res == PLURAL or (res == "horizontalpodautoscalers" and sub == ""):
            key = f"{labels['verb']} {res}{'/' + sub if sub else ''} {labels.get('code')}"
            ours[key] = ours.get(key, 0.0) + value
    return ours, total


def delta(after: dict[str, float], before: dict[str, float]) -> dict[str, float]:
    return {k: v - before.get(k, 0.0) for k, v in after.items() if v - before.get(k, 0.0)}


def floorcast_events(api: k8s.ApiClient) -> int:
    items = k8s.CoreV1Api(api).list_namespaced_event(NS).items
    return sum((e.count or 1) for e in items if e.source and e.source.component == "floorcast")


def rss_mib(pid: int) -> tuple[float, float]:
    fields = dict(line.split(":", 1) for line in Path(f"/proc/{pid}/status").read_text()
                  .splitlines() if ":" in line)  # fmt: skip
    kib = lambda k: float(fields[k].split()[0])  # noqa: E731
    return kib("VmRSS") / 1024, kib("VmHWM") / 1024


def watch_hpas(api: k8s.ApiClient, want: int, seen: dict[str, float],
               stop: threading.Event) -> None:  # fmt: skip
    """Record the first time each HPA's minReplicas is ``want``."""
    auto = k8s.AutoscalingV2Api(api)
    while not stop.is_set():
        w = watch.Watch()
        for ev in w.stream(auto.list_namespaced_horizontal_pod_autoscaler, NS,
                           timeout_seconds=5):  # fmt: skip
            h = ev["object"]
            if h.spec.min_replicas == want and h.metadata.name not in seen:
                seen[h.metadata.name] = time.monotonic()
            if stop.is_set():
                w.stop()


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--policies", type=int, default=500)
    ap.add_argument("--changes", type=int, default=50)
    ap.add_argument("--gap", type=float, default=0.5, help="seconds between ConfigMap changes")
    ap.add_argument("--idle", type=float, default=60.0, help="idle window, seconds")
    ap.add_argument("--interval", default="10m", help="the operator's safety-net resync")
    ap.add_argument("--idle-after", type=float, default=None,
                    help="seconds from the operator's start to the idle window "
                         "(default 0.75 x interval: inside the first resync cycle)")  # fmt: skip
    args = ap.parse_args()
    if args.idle_after is None:
        args.idle_after = 0.75 * pd.Timedelta(args.interval).total_seconds()
    n, changes = args.policies, min(args.changes, args.policies)

    # HPA sync 15 s: kube-controller-manager's default (its --help, "--horizontal-pod-
    # autoscaler-sync-period duration Default: 15s"); 500 HPAs at the harness's 2 s would
    # load the 2 cores with HPA status work unrelated to floorcast.
    cp = ControlPlane(hpa_sync_period="15s")
    cp.start()
    print(f"control plane up in {cp.startup_seconds['total']:.1f}s", flush=True)
    proc = None
    try:
        cp.kubectl("apply", "-f", str(CRD))
        cp.kubectl("wait", "--for=condition=Established", "--timeout=60s",
                   f"crd/{PLURAL}.{GROUP}")  # fmt: skip
        api = cp.api_client()
        api.configuration.connection_pool_maxsize = 16
        api.rest_client.pool_manager.connection_pool_kw["maxsize"] = 16
        k8s.CoreV1Api(api).create_namespace({"metadata": {"name": NS}})
        took = create_all(api, n)
        print(f"created {4 * n} objects ({n} policies) in {took:.1f}s", flush=True)

        mport = free_port()
        log = open(Path(cp.run_dir or "/tmp") / "bench-operator.log", "w")  # noqa: SIM115
        floorcast = Path(sys.executable).parent / "floorcast"
        proc = subprocess.Popen([str(floorcast), "run", "--namespace", NS, "--interval",
                                 args.interval, "--metrics-port", str(mport),
                                 "--liveness-port", "0", "--kubeconfig", str(cp.kubeconfig)],
                                stdout=log, stderr=subprocess.STDOUT,
                                start_new_session=True)  # fmt: skip
        began = time.monotonic()
        while (ready := ready_count(api)) < n:
            if proc.poll() is not None or time.monotonic() - began > 600:
                log.flush()
                tail = Path(log.name).read_text().splitlines()[-30:]
                raise SystemExit(f"operator: {ready}/{n} Ready; rc={proc.poll()}; "
                                 f"RSS {rss_mib(proc.pid)}; log tail:\n" + "\n".join(tail))
            time.sleep(2)
        ready_s = time.monotonic() - began
        print(f"all {n} policies Ready {ready_s:.1f}s after start", flush=True)
        quiet = quiesce(cp)
        print(f"no operator write for {QUIET_S:.0f}s, {quiet:.1f}s later (start-up writes "
              "done)", flush=True)  # fmt: skip

        busy0, _ = apiserver_writes(cp)
        seen: dict[str, float] = {}
        stop = threading.Event()
        watcher = threading.Thread(target=watch_hpas, args=(cp.api_client(), 7, seen, stop),
                                   daemon=True)  # fmt: skip
        watcher.start()
        time.sleep(2)
        core, peak = k8s.CoreV1Api(api), forecast(6.5)  # needs ceil(6.5) = 7
        sent: dict[str, float] = {}
        for i in range(changes):
            name = f"w{i * (n // changes):04d}"
            core.patch_namespaced_config_map(f"{name}-fc", NS, {"data": {"f.json": peak}})
            sent[name] = time.monotonic()
            time.sleep(args.gap)
        deadline = time.monotonic() + 120
        while len(set(sent) & set(seen)) < len(sent) and time.monotonic() < deadline:
            time.sleep(0.2)
        stop.set()
        busy1, _ = apiserver_writes(cp)
        # Cross-check of the counting method: each change is one HPA patch + one status
        # patch, so this must be >= 2 x changes, or the counter misses writes.
        print(f"operator-writable writes during the {changes} changes: {delta(busy1, busy0)}",
              flush=True)  # fmt: skip
        lat = sorted(seen[k] - sent[k] for k in sent if k in seen)
        missing = len(sent) - len(lat)
        p50 = statistics.median(lat) if lat else float("nan")
        p95 = lat[min(len(lat) - 1, int(0.95 * len(lat)))] if lat else float("nan")
        print(f"latency over {len(lat)} changes (missing {missing}): p50 {p50:.2f}s p95 "
              f"{p95:.2f}s max {max(lat, default=float('nan')):.2f}s", flush=True)  # fmt: skip
        # The idle window lies inside the first resync cycle (slots from half a period
        # after each first reconcile on, controller/schedule.py), so its reconciles are
        # the steady resync rate and its writes include what resyncs write (nothing).
        idle_at = began + args.idle_after
        if time.monotonic() < idle_at:
            print(f"waiting {idle_at - time.monotonic():.0f}s for the resync cycle "
                  f"(--idle-after {args.idle_after:.0f}s from start)", flush=True)
            time.sleep(idle_at - time.monotonic())
        ours0, all0 = apiserver_writes(cp)
        ev0 = floorcast_events(api)
        rec0 = reconciles(mport)
        time.sleep(args.idle)
        rec1 = reconciles(mport)
        ours1, all1 = apiserver_writes(cp)
        ev1 = floorcast_events(api)
        idle_by = delta(ours1, ours0)
        idle = (sum(idle_by.values()) + ev1 - ev0) * 60 / args.idle
        print(f"idle writes by kind: {idle_by}", flush=True)
        n_idle = sum(idle_by.values())
        print(f"idle {args.idle:.0f}s: operator-writable writes {n_idle:.0f}, floorcast "
              f"Events {ev1 - ev0}, cluster-wide writes {all1 - all0:.0f} (controller-manager "
              f"included) -> idle_writes_per_min={idle:.1f}", flush=True)  # fmt: skip
        rate = (rec1 - rec0) / args.idle
        print(f"steady reconciles: {rec1 - rec0:.0f} in {args.idle:.0f}s -> "
              f"reconciles_per_s={rate:.2f}", flush=True)  # fmt: skip
        rss_idle, _ = rss_mib(proc.pid)

        rss, hwm = rss_mib(proc.pid)
        print(f"operator RSS: {rss_idle:.0f} MiB idle, {rss:.0f} MiB now, {hwm:.0f} MiB peak "
              f"(VmHWM)", flush=True)  # fmt: skip
        print(
            f"ready_s={ready_s:.1f} p50_s={p50:.2f} p95_s={p95:.2f} "
            f"idle_writes_per_min={idle:.1f} reconciles_per_s={rate:.2f} "
            f"rss_mib={max(rss, hwm):.0f}"
        )
    finally:
        if proc is not None and proc.poll() is None:
            os.killpg(proc.pid, signal.SIGTERM)
            try:
                proc.wait(15)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)
        cp.stop()


if __name__ == "__main__":
    main()
