"""``leadTime: auto`` on the living cluster (docs/policy.md, "Measured lead time"): the
operator lists the target's Pods and measures creation → Ready, which kwok makes take
the harness's ready delay (40 s by default, per Pod overridable by annotation) plus
scheduling. By hand: three Pods Ready after 40 s (a second or two more for binding and
kwok's stage) → p90 ≈ 41 s, + the 30 s margin → a lead of about 71 s; with the
annotation at 15 s, about 46 s. A target with no Pods falls back to the default 5m.
"""

from __future__ import annotations

import math
import time

import pytest

from e2e.controlplane.living import READY_DELAY_ANNOTATION
from e2e.living_env import create_service, forecast_for, living_env, ready_pods, wait_until
from e2e.operator_env import policy_body
from floorcast.durations import parse_duration

SLOW, FAST, EMPTY = "slow", "fast", "empty"  # 40 s (the harness default), 15 s, no Pods


@pytest.fixture(scope="module")
def measured(living_plane, tmp_path_factory):
    with living_plane.api_client() as api, \
            living_env(living_plane, tmp_path_factory.mktemp("lead"), api) as env:  # fmt: skip
        create_service(env, SLOW, replicas=3)
        create_service(env, FAST, replicas=3, pod_annotations={READY_DELAY_ANNOTATION: "15s"})
        create_service(env, EMPTY, replicas=0)
        # Idle Pods would let the HPA scale 3 down to its minimum of 2 before all three
        # are Ready (30 s scale-down window), leaving 2 samples: hold it at 3.
        for name in (SLOW, FAST):
            env.hpas.patch_namespaced_horizontal_pod_autoscaler(
                name, env.namespace, {"spec": {"minReplicas": 3}})
        wait_until(lambda: ready_pods(env, SLOW) == 3 and ready_pods(env, FAST) == 3, 240,
                   "3 Ready pods of each service")  # fmt: skip
        origin = math.ceil(time.time() / 60) * 60
        for name in (SLOW, FAST, EMPTY):
            env.put_forecast(forecast_for(lambda t: 1.0, origin), name=f"{name}-forecast")
            body = policy_body(name, target=name, mode="DryRun",
                               forecast={"configMapRef": {"name": f"{name}-forecast",
                                                          "key": "f.json"}})  # fmt: skip
            body["spec"].update(capacity={"perReplica": 0.7}, leadTime="auto")
            env.create_policy(body)
        env.start_operator()
        yield env


def _lead(env, name: str) -> dict:
    return (env.policy(name).get("status") or {}).get("leadTime") or {}


def _measured(env, name: str) -> dict:
    try:
        return wait_until(lambda: _lead(env, name) if _lead(env, name).get("source") else None,
                          90, f"status.leadTime of {name}")  # fmt: skip
    except AssertionError as e:
        raise AssertionError(f"{e}; status {env.policy(name).get('status')}; operator log:\n"
                             f"{env.operator_log()[-3000:]}") from None


def _seconds(text: str) -> float:
    return parse_duration(text).total_seconds()


@pytest.mark.parametrize(("name", "delay"), [(SLOW, 40), (FAST, 15)])
def test_the_lead_converges_to_the_pods_start_up(measured, name: str, delay: int) -> None:
    env = measured
    lead = _measured(env, name)
    assert lead["source"] == "Measured" and lead["samples"] == 3, lead
    startup = _seconds(lead["podStartup"])
    assert delay <= startup <= delay + 10, lead  # the harness's delay + binding
    assert _seconds(lead["value"]) == startup + 30  # + the default margin
    cond = env.condition(name, "LeadTimeMeasured")
    assert cond["status"] == "True" and f"over 3 Pods of ReplicaSet {name}-" in cond["message"]


def test_a_target_without_pods_falls_back_to_the_default_lead(measured) -> None:
    env = measured
    lead = _measured(env, EMPTY)
    assert lead == {"value": "5m", "source": "Default", "samples": 0}, lead
    cond = env.condition(EMPTY, "LeadTimeMeasured")
    assert (cond["status"], cond["reason"]) == ("False", "TooFewPods"), cond
    assert "3 needed" in cond["message"] and "fallback lead 5m" in cond["message"]
    assert env.condition(EMPTY, "Ready")["status"] == "True"  # the policy still works
