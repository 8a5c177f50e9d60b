"""The live demo's load: the shop's services really use CPU, and one has a twin.

On the local living control plane (kwok Pods that take ``READY_DELAY`` to become
Ready, metrics-server, the real HPA controller), each service's demand follows its
replayed forecast: ``e2e/load.py``'s driver shares it over the Ready Pods as CPU
usage, converted from the service's unit with its per-replica capacity at the HPA
target (one pod requests one core). ``storefront-alone`` is storefront's twin —
same Deployment, HPA and load, no policy — so the table shows floorcast's Pods
Ready before the peak while the HPA alone saturates.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np
from rich.table import Table

from floorcast import scenario
from floorcast.core.series import Series
from floorcast.scenario import BASELINE, TARGET

TWIN, TWIN_OF = "storefront-alone", "storefront"
#: Seconds from a demo Pod's start until it is Ready (time-compressed start-up).
READY_DELAY = 20.0
#: The HPA controller's sync period in the demo (15 s in a default cluster).
HPA_SYNC = "5s"


def cores_trace(fc: Series, service: str, origin: float) -> Any:
    """Demand in cores at ``origin + t`` seconds: the replayed forecast, interpolated."""
    per = scenario.service(service).per_replica
    x = fc.times.as_unit("ns").asi8 / 1e9
    y = np.asarray(fc.values, dtype=float) * TARGET / per

    def load(t: float) -> float:
        return float(np.interp(origin + t, x, y))

    return load


def start_drivers(api: Any, namespace: str, forecasts: dict[str, Series],
                  origin: float) -> list[Any]:  # fmt: skip
    """One load driver per Deployment (the twin shares storefront's demand), started
    once every Deployment's first Pods are Ready, so the table starts from a settled
    shop rather than from Pods still warming up."""
    from kubernetes import client as k8s

    from e2e.load import LoadDriver, is_ready

    names = [s.name for s in scenario.SERVICES] + [TWIN]
    core = k8s.CoreV1Api(api)
    deadline = time.monotonic() + READY_DELAY + 60
    while time.monotonic() < deadline:
        pods = core.list_namespaced_pod(namespace).items
        ready = sum(is_ready(p) for p in pods if p.metadata.deletion_timestamp is None)
        if ready >= BASELINE * len(names):
            break
        time.sleep(1)
    drivers = []
    for name in names:
        src = TWIN_OF if name == TWIN else name
        trace = cores_trace(forecasts[src], src, origin)
        d = LoadDriver(api, namespace, f"app={name}", trace, capacity=1.0, origin=origin)
        d.start()
        drivers.append(d)
    return drivers


def living_sample(api: Any, namespace: str, name: str, driver: Any | None) -> dict[str, Any]:
    """What the HPA and the Pods say right now: desired replicas, utilization, Ready."""
    from kubernetes import client as k8s

    hpa = k8s.AutoscalingV2Api(api).read_namespaced_horizontal_pod_autoscaler(name, namespace)
    util: Any = "–"
    for m in (hpa.status.current_metrics or []) if hpa.status else []:
        if m.resource and m.resource.current and m.resource.current.average_utilization:
            util = f"{m.resource.current.average_utilization}%"
    last = driver.samples[-1] if driver is not None and driver.samples else None
    return {
        "desired": hpa.status.desired_replicas if hpa.status else "–",
        "utilization": util,
        "ready": last.ready if last else "–",
        "pods": last.pods if last else "–",
        "load": round(last.load, 2) if last else "–",
        "saturated": bool(last and last.load > last.ready * driver.capacity + 1e-9),
    }


def table(rows: list[dict[str, Any]], left: float) -> Table:
    """The live table; with the living cluster it shows what the HPA and Pods do."""
    living = any("ready" in r for r in rows)
    cols = ["service", "mode", "floor", "proposed (DryRun)", "HPA minReplicas"]
    keys = ["service", "mode", "floor", "proposed", "minReplicas"]
    if living:
        cols += ["HPA desired", "Ready / Pods", "CPU vs target", "load (cores)"]
        keys += ["desired", "ready_pods", "utilization", "load"]
    else:
        cols.append("Deployment replicas")
        keys.append("replicas")
    t = Table(*cols, title=f"shop — live ({left:.0f}s left, Ctrl-C stops)")
    for r in rows:
        r = {**r, "ready_pods": f"{r.get('ready', '–')} / {r.get('pods', '–')}"}
        cells = [str(r.get(k, "–")) for k in keys]
        if r.get("saturated"):  # demand above what the Ready Pods carry at 100 %
            cells[keys.index("ready_pods")] = f"[bold red]{cells[keys.index('ready_pods')]} ▲[/]"
        t.add_row(*cells)
    return t
