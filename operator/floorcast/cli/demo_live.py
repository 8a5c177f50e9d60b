"""``floorcast demo`` live: the shop on a real control plane with the operator running.

The demo's clock is real, but the shop's peaks are hours apart, so each forecast is
replayed faster: its 5-minute points are re-stamped ``SPEED`` times closer together and
shifted so that the service's biggest peak lands ``peak_at`` into the live phase.
Lead and hold times shrink by the same factor, so the floor visibly rises ahead of the
peak within a few minutes, and the real HPA controller scales the Deployment after it.

On the local control plane the cluster is alive (``demo_load.py``): Pods take
``READY_DELAY`` to become Ready, each service's demand follows its replayed forecast
as real CPU usage that metrics-server reports, and storefront has an HPA-alone twin.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import pandas as pd
import yaml
from rich.console import Console
from rich.live import Live

from floorcast import scenario
from floorcast.cli import demo_load
from floorcast.core.series import Series
from floorcast.core.series_text import to_json_text
from floorcast.durations import parse_duration
from floorcast.errors import InputError
from floorcast.scenario import BASELINE, HPA_MAX, forecast_shop, policy_text

#: Forecast time runs this much faster than the wall clock (5 min -> 5 s).
SPEED = 60
#: Live lead/hold (each 30 forecast-minutes at SPEED); the bundled ones are minutes.
LIVE_LEAD, LIVE_HOLD = "30s", "30s"
NAMESPACE = "shop"
GROUP, VERSION, PLURAL = "floorcast.dev", "v1alpha1", "forecastscalingpolicies"
ROOT = Path(__file__).resolve().parents[3]


@dataclass
class LiveResult:
    """Samples of the live table (one dict per service and tick) and the files made."""

    samples: list[dict[str, Any]] = field(default_factory=list)
    reports: dict[str, Path] = field(default_factory=dict)
    index: Path | None = None
    #: The demo created the namespace, so tearing down may delete it (never otherwise).
    created_namespace: bool = False


def replay_fast(fc: Series, *, now: pd.Timestamp, peak_at: pd.Timedelta) -> Series:
    """The forecast re-stamped ``SPEED`` times faster, its biggest peak at now + peak_at."""
    step = fc.step / SPEED
    peak = int(fc.upper_or_value().argmax())
    start = (now + peak_at - step * peak).floor("s")
    return replace(fc, start=start, step=step, generated=now.floor("s"))


def live_policy(service: str) -> dict[str, Any]:
    """The bundled policy with lead/hold scaled to demo time and no dated events."""
    doc = yaml.safe_load(policy_text(service))
    doc["spec"]["leadTime"], doc["spec"]["holdTime"] = LIVE_LEAD, LIVE_HOLD
    doc["spec"].pop("plannedEvents", None)
    doc["metadata"]["namespace"] = NAMESPACE
    return doc


def _checkout() -> Path | None:
    """The source checkout holding the e2e harness, if floorcast runs from one."""
    return ROOT if (ROOT / "e2e" / "controlplane" / "runner.py").exists() else None


def _step(console: Console, what: str, t0: float) -> None:
    console.print(f"[green]✓[/green] {what} [dim]({time.monotonic() - t0:.1f}s)[/dim]")


def _workload(name: str) -> tuple[dict[str, Any], dict[str, Any]]:
    labels = {"app": name}
    dep = {
        "apiVersion": "apps/v1", "kind": "Deployment", "metadata": {"name": name},
        "spec": {"replicas": BASELINE, "selector": {"matchLabels": labels},
                 "template": {"metadata": {"labels": labels}, "spec": {"containers": [
                     {"name": "app", "image": "registry.k8s.io/pause:3.10",
                      "resources": {"requests": {"cpu": "1"}}}]}}},
    }  # fmt: skip
    hpa = {
        "apiVersion": "autoscaling/v2", "kind": "HorizontalPodAutoscaler",
        "metadata": {"name": name},
        "spec": {"scaleTargetRef": {"apiVersion": "apps/v1", "kind": "Deployment", "name": name},
                 "minReplicas": BASELINE, "maxReplicas": HPA_MAX,
                 "metrics": [{"type": "Resource", "resource": {"name": "cpu", "target": {
                     "type": "Utilization", "averageUtilization": 80}}}]},
    }  # fmt: skip
    return dep, hpa


def _sample(api: Any, service: str, mode: str, driver: Any | None = None) -> dict[str, Any]:
    from kubernetes import client as k8s

    st: dict[str, Any] = {}
    if service != demo_load.TWIN:
        pol = k8s.CustomObjectsApi(api).get_namespaced_custom_object(
            GROUP, VERSION, NAMESPACE, PLURAL, service
        )
        st = pol.get("status") or {}
    hpa = k8s.AutoscalingV2Api(api).read_namespaced_horizontal_pod_autoscaler(service, NAMESPACE)
    dep = k8s.AppsV1Api(api).read_namespaced_deployment(service, NAMESPACE)
    row = {
        "t": time.time(), "service": service, "mode": mode,
        "baseline": st.get("baseline", "–"), "floor": st.get("floor", "–"),
        "proposed": st.get("proposedFloor", "–"), "minReplicas": hpa.spec.min_replicas,
        "replicas": dep.spec.replicas,
    }  # fmt: skip
    if driver is not None:
        row.update(demo_load.living_sample(api, NAMESPACE, service, driver))
    return row


def _install(api: Any, console: Console, result: LiveResult, *, twin: bool = False) -> None:
    """CRD and the operator's ClusterRole from the checkout, the shop's objects.

    The namespace must not exist yet: the demo deletes it when it is done, and on a
    cluster given with --kubeconfig an existing one may hold somebody's work."""
    from kubernetes import client as k8s
    from kubernetes import utils
    from kubernetes.client.rest import ApiException

    t0 = time.monotonic()
    for path in (ROOT / "crds", ROOT / "charts" / "floorcast" / "files" / "operator-rbac.yaml"):
        for f in sorted(path.glob("*.yaml")) if path.is_dir() else [path]:
            try:
                utils.create_from_yaml(api, str(f))
            except utils.FailToCreateError as e:
                if any(x.status != 409 for x in e.api_exceptions):
                    raise
    ext = k8s.ApiextensionsV1Api(api)
    crd = f"{PLURAL}.{GROUP}"
    for _ in range(120):
        conds = ext.read_custom_resource_definition(crd).status.conditions or []
        if any(c.type == "Established" and c.status == "True" for c in conds):
            break
        time.sleep(0.5)
    _step(console, "installed the CRD and the operator's RBAC", t0)
    t0 = time.monotonic()
    core = k8s.CoreV1Api(api)
    try:
        core.create_namespace({"metadata": {"name": NAMESPACE}})
    except ApiException as e:
        if e.status != 409:
            raise
        raise InputError(
            f"namespace {NAMESPACE!r} already exists in that cluster; the demo creates it "
            "and deletes it afterwards, so it leaves an existing one alone. Delete it or "
            "use a throw-away cluster"
        ) from None
    result.created_namespace = True
    names = [s.name for s in scenario.SERVICES] + ([demo_load.TWIN] if twin else [])
    for name in names:
        dep, hpa = _workload(name)
        k8s.AppsV1Api(api).create_namespaced_deployment(NAMESPACE, dep)
        k8s.AutoscalingV2Api(api).create_namespaced_horizontal_pod_autoscaler(NAMESPACE, hpa)
    extra = f" (incl. {demo_load.TWIN}, storefront's twin without a policy)" if twin else ""
    _step(console, f"namespace {NAMESPACE}: {len(names)} Deployments and HPAs{extra}, "
          f"minReplicas {BASELINE}", t0)  # fmt: skip


def _operator_kubeconfig(cluster: Any, work: Path, api: Any) -> Path:
    """A ServiceAccount token kubeconfig bound to the operator's ClusterRole."""

    from e2e.controlplane.tokens import bind_cluster_role, service_account_credentials

    creds = service_account_credentials(cluster, NAMESPACE, "floorcast-operator", work)
    bind_cluster_role(api, NAMESPACE, creds.name)
    return creds.kubeconfig


def _start_cluster(console: Console) -> Any:
    root = _checkout()
    if root is None:
        raise InputError(
            "floorcast demo: the local control plane comes with a source checkout "
            "(make demo); pass --kubeconfig PATH for a throw-away cluster, or --offline"
        )
    if str(root) not in sys.path:
        sys.path.insert(0, str(root))
    from e2e.controlplane import build
    from e2e.controlplane.living import LivingSettings
    from e2e.controlplane.runner import ControlPlane

    t0 = time.monotonic()
    extra = (build.kwok_path(), build.metrics_server_path())
    if not all(p.exists() for p in (*build.binaries().all(), *extra)):
        console.print(
            "[yellow]building etcd, the Kubernetes control plane, kwok and metrics-server "
            f"from Go modules into {build.cache_root()}: a one-time 20-40 minutes on 2 "
            "cores[/yellow]"
        )
        build.ensure_built()
        build.ensure_kwok()
        build.ensure_metrics_server()
        _step(console, "built the control plane", t0)
    else:
        _step(console, f"control plane binaries cached in {build.cache_root()}", t0)
    t0 = time.monotonic()
    living = LivingSettings(pod_ready_delay=demo_load.READY_DELAY)
    with console.status("starting etcd, kube-apiserver, kube-controller-manager, "
                        "kube-scheduler, kwok Nodes and metrics-server"):  # fmt: skip
        cp = ControlPlane(living=living, hpa_sync_period=demo_load.HPA_SYNC).start()
    _step(console, f"control plane up at {cp.server}", t0)
    return cp


def run_live(
    out: Path,
    console: Console,
    *,
    kubeconfig: Path | None = None,
    duration: str = "4m",
    plots: bool = True,
) -> LiveResult:
    """Offline forecasts, then the live phase on a cluster, then the reports; always
    tears down what it started (also on Ctrl-C)."""
    live_for = parse_duration(duration, field="--duration").total_seconds()
    if live_for < 30:
        raise InputError(f"--duration must be at least 30s, got {duration!r}")
    from kubernetes import client as k8s
    from kubernetes import config as k8s_config

    out.mkdir(parents=True, exist_ok=True)
    result = LiveResult()
    cluster: Any = None
    operator: subprocess.Popen | None = None
    procs: list[subprocess.Popen] = []
    api: Any = None
    drivers: list[Any] = []
    work = Path(tempfile.mkdtemp(prefix="floorcast-demo-"))
    try:
        if kubeconfig is None:
            cluster = _start_cluster(console)
            admin = cluster.kubeconfig
        else:
            admin = kubeconfig
        api = k8s_config.new_client_from_config(str(admin))
        _install(api, console, result, twin=cluster is not None)
        t0 = time.monotonic()
        with console.status("forecasting each service from its two weeks of history"):
            forecasts = forecast_shop()
        now = pd.Timestamp.now(tz="UTC")
        peak_at = pd.Timedelta(seconds=round(live_for * 0.55))
        core = k8s.CoreV1Api(api)
        fast: dict[str, Series] = {}
        for svc in scenario.SERVICES:
            fc = fast[svc.name] = replay_fast(forecasts[svc.name], now=now, peak_at=peak_at)
            (out / f"{svc.name}-live-forecast.json").write_text(to_json_text(fc))
            core.create_namespaced_config_map(NAMESPACE, {
                "metadata": {"name": f"{svc.name}-forecast",
                             "labels": {"floorcast.dev/forecast": "true"}},
                "data": {"forecast.json": to_json_text(fc)},
            })  # fmt: skip
        _step(console, f"forecasts stored in ConfigMaps, replayed {SPEED}× fast, peaks "
              f"{peak_at.total_seconds():.0f}s from now", t0)  # fmt: skip
        modes = {}
        custom = k8s.CustomObjectsApi(api)
        for svc in scenario.SERVICES:
            body = live_policy(svc.name)
            modes[svc.name] = body["spec"]["mode"]
            custom.create_namespaced_custom_object(GROUP, VERSION, NAMESPACE, PLURAL, body)
        listed = ", ".join(f"{name} {mode}" for name, mode in modes.items())
        if cluster is not None:
            drivers = demo_load.start_drivers(api, NAMESPACE, fast, now.timestamp())
            modes[demo_load.TWIN] = "HPA alone"
            console.print(f"[green]✓[/green] load running: each service's demand follows its "
                          f"forecast as CPU; Pods are Ready {demo_load.READY_DELAY:.0f}s after "
                          "they start")  # fmt: skip
        console.print(f"[green]✓[/green] policies applied: {listed} (leadTime "
                      f"{LIVE_LEAD}, holdTime {LIVE_HOLD})")  # fmt: skip
        op_cfg = _operator_kubeconfig(cluster, work, api) if cluster is not None else admin
        log = (out / "operator.log").open("w")
        cmd = [str(Path(sys.executable).parent / "floorcast"), "run", "--namespace", NAMESPACE,
               "--interval", "2s", "--metrics-port", "0", "--liveness-port", "0",
               "--kubeconfig", str(op_cfg)]  # fmt: skip
        operator = subprocess.Popen(
            cmd, stdout=log, stderr=subprocess.STDOUT, start_new_session=True
        )
        procs.append(operator)
        console.print(f"[green]✓[/green] operator running (log: {out / 'operator.log'})")
        # The back-test needs no cluster: run it beside the live phase, not after it.
        bt_log = (out / "backtest.log").open("w")
        backtest = subprocess.Popen(
            [cmd[0], "demo", "--offline", "--output", str(out), *([] if plots else ["--no-plots"])],
            stdout=bt_log, stderr=subprocess.STDOUT, start_new_session=True,
        )  # fmt: skip
        procs.append(backtest)
        end = time.monotonic() + live_for
        rows: list[dict[str, Any]] = []
        with Live(demo_load.table(rows, live_for), console=console, refresh_per_second=2) as live:
            while (left := end - time.monotonic()) > 0:
                if operator.poll() is not None:
                    raise RuntimeError(f"the operator exited; see {out / 'operator.log'}")
                by = {d.selector.removeprefix("app="): d for d in drivers}
                rows = [_sample(api, n, modes[n], by.get(n)) for n in modes]
                result.samples.extend(rows)
                live.update(demo_load.table(rows, left))
                time.sleep(2)
        console.print()
        (out / "live-samples.json").write_text(json.dumps(result.samples, indent=1))
        with console.status("writing the back-test reports (two weeks replayed per service)"):
            rc = backtest.wait()
        if rc != 0:
            raise RuntimeError(f"the back-test failed; see {out / 'backtest.log'}")
        result.reports = {s.name: out / f"{s.name}-backtest.html" for s in scenario.SERVICES}
        result.index = out / "index.html"
        console.print(f"Back-test reports: [bold]{result.index.resolve()}[/bold]")
    except KeyboardInterrupt:
        console.print("[yellow]interrupted: tearing down[/yellow]")
    finally:
        for d in drivers:
            d.stop()
        _teardown(console, api, procs, cluster, result.created_namespace)
    return result


def _teardown(console: Console, api: Any, procs: list[subprocess.Popen], cluster: Any,
              created_namespace: bool) -> None:  # fmt: skip
    t0 = time.monotonic()
    if cluster is None and api is not None and created_namespace:
        _delete_policies(console, api)  # an existing cluster: remove what we made
    for p in procs:  # the operator and the back-test, each in its own process group
        if p.poll() is None:
            os.killpg(p.pid, signal.SIGTERM)
    for p in procs:
        try:
            p.wait(10)
        except subprocess.TimeoutExpired:
            os.killpg(p.pid, signal.SIGKILL)
            p.wait(5)
    if api is not None:
        if cluster is None and created_namespace:
            from kubernetes import client as k8s

            try:
                k8s.CoreV1Api(api).delete_namespace(NAMESPACE)
            except Exception as e:
                console.print(f"[yellow]could not delete namespace {NAMESPACE}: {e}[/yellow]")
        api.close()
    if cluster is not None:
        cluster.stop()
    _step(console, "torn down", t0)


def _delete_policies(console: Console, api: Any, wait_seconds: float = 30) -> None:
    """Delete the demo's policies while the operator still runs, so its finalizer
    restores each baseline; strip what is left after ``wait_seconds`` (the namespace is
    going anyway) rather than leave it stuck Terminating."""
    from kubernetes import client as k8s

    custom = k8s.CustomObjectsApi(api)

    def left() -> list[str]:
        items = custom.list_namespaced_custom_object(GROUP, VERSION, NAMESPACE, PLURAL)
        return [p["metadata"]["name"] for p in items["items"]]

    try:
        for name in left():
            custom.delete_namespaced_custom_object(GROUP, VERSION, NAMESPACE, PLURAL, name)
        deadline = time.monotonic() + wait_seconds
        while (names := left()) and time.monotonic() < deadline:
            time.sleep(0.5)
        for name in names:
            console.print(f"[yellow]policy {name}: the operator did not finish; removing its "
                          "finalizer[/yellow]")  # fmt: skip
            custom.patch_namespaced_custom_object(GROUP, VERSION, NAMESPACE, PLURAL, name,
                                                  {"metadata": {"finalizers": None}})  # fmt: skip
    except Exception as e:  # best effort: report and go on tearing down
        console.print(f"[yellow]could not delete the policies: {e}[/yellow]")
