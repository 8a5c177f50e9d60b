"""The live correction on the living cluster: the real HPA controller reports the CPU
metrics-server measures, the operator reads that status as load and corrects a
forecast that is a level too low (docs/policy.md, "Live correction").

Set-up: 1-core Pods, HPA target 70 % (perReplica 0.7 cores), a forecast of a flat
1.0 core, a real load of 1.6 cores. By hand: the plan needs ceil(1.0 / 0.7) = 2 (the
baseline); the HPA reports about 1.6 cores (utilization / 70 % × replicas × 0.7),
so the factor is about 1.6 and the corrected floor ceil(1.6 × 1.0 / 0.7) = 3.
"""

from __future__ import annotations

import math
import re
import socket
import time
import urllib.request

import pytest

from e2e.living_env import (
    HPA_MIN,
    POD_CPU,
    create_service,
    forecast_for,
    living_env,
    ready_pods,
    wait_until,
)
from e2e.load import LoadDriver
from e2e.operator_env import policy_body

NAME = "busy"
PER_REPLICA = 0.7  # one 1-core Pod at the 70 % target
FORECAST_LOAD, REAL_LOAD = 1.0, 1.6


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _forecast(origin: float, hours: float = 2) -> str:
    """A 1-minute forecast of a flat FORECAST_LOAD from ten minutes before ``origin``."""
    return forecast_for(lambda t: FORECAST_LOAD, origin, hours=hours)


@pytest.fixture(scope="module")
def corrected(living_plane, tmp_path_factory):
    with living_plane.api_client() as api, \
            living_env(living_plane, tmp_path_factory.mktemp("live"), api) as env:  # fmt: skip
        create_service(env, NAME)
        wait_until(lambda: ready_pods(env, NAME) == HPA_MIN, 120, "2 Ready pods")
        origin = math.ceil(time.time() / 60) * 60
        env.put_forecast(_forecast(origin), name=f"{NAME}-forecast")
        body = policy_body(NAME, target=NAME,
                           forecast={"configMapRef": {"name": f"{NAME}-forecast",
                                                      "key": "f.json"}})  # fmt: skip
        body["spec"].update(capacity={"perReplica": PER_REPLICA}, leadTime="30s",
                            holdTime="0s", headroom=0,
                            liveCorrection={"enabled": True, "halfLife": "1m"})  # fmt: skip
        env.create_policy(body)
        port = _free_port()
        env.start_operator("--metrics-port", str(port))
        with LoadDriver(api, env.namespace, f"app={NAME}", lambda t: REAL_LOAD,
                        capacity=POD_CPU) as drv:  # fmt: skip
            yield env, port, drv


def _live(env) -> dict:
    return (env.policy(NAME).get("status") or {}).get("liveCorrection") or {}


def test_the_factor_from_the_hpas_status_is_in_status_metrics_and_events(corrected) -> None:
    env, port, drv = corrected
    # The HPA must first report utilization; then one half-life of readings.
    live = wait_until(lambda: _live(env) if _live(env).get("reason") == "Active" else None,
                      360, "status.liveCorrection Active")  # fmt: skip
    assert 1.3 <= live["factor"] <= 1.9, live  # ≈ REAL_LOAD / FORECAST_LOAD
    assert "halfLife 1m" in live["message"]
    # The corrected floor reaches the HPA: 3, above the plan's (and baseline's) 2.
    wait_until(lambda: env.hpa(NAME).spec.min_replicas == 3, 120, "minReplicas 3")
    raised = [e for e in env.events("FloorRaised") if "live correction" in e.message]
    assert raised, [e.message for e in env.events("FloorRaised")]
    assert re.search(r"live correction ×1\.\d\d, plan 2", raised[-1].message), raised[-1].message
    text = urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=10).read().decode()
    m = re.search(r'floorcast_live_correction_factor\{namespace="[^"]+",policy="busy"\} (\S+)',
                  text)  # fmt: skip
    assert m, "the factor metric is exported"
    assert 1.3 <= float(m.group(1)) <= 1.9
    assert not drv.errors, drv.errors


def test_without_utilization_the_plan_stands(corrected) -> None:
    """Removing the HPA's CPU target (a custom metric instead) leaves no reading: the
    correction says so and the floor goes back to the plan, never below it."""
    env, _, _ = corrected
    env.hpas.patch_namespaced_horizontal_pod_autoscaler(NAME, env.namespace, {"spec": {
        "metrics": [{"type": "Resource", "resource": {"name": "memory", "target": {
            "type": "AverageValue", "averageValue": "1Gi"}}}]}})  # fmt: skip
    live = wait_until(lambda: _live(env) if _live(env).get("reason") == "NoObservation" else None,
                      180, "status.liveCorrection NoObservation")  # fmt: skip
    assert "CPU averageUtilization target" in live["message"]
    assert live["factor"] == 1.0
    wait_until(lambda: env.hpa(NAME).spec.min_replicas == 2, 60, "minReplicas back to 2")
