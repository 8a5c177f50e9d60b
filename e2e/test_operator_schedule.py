"""The operator wakes a policy at its planned floor change, not on a timer
(docs/operations.md, "When the operator reconciles"): with the safety-net resync an hour
long, the floor still rises at ``status.nextChange.at`` (within the wake margin plus
the API round trips), and an input change still acts within seconds."""

from __future__ import annotations

import time

import pandas as pd
import pytest

from e2e.operator_env import BASELINE, Env, forecast_json, min_replicas, policy_body

pytestmark = pytest.mark.e2e
#: The schedule's margin (1 s, controller/schedule.py) plus a patch and a watch event
#: on a shared 2-core machine.
SLACK_S = 5.0


def test_the_floor_rises_at_its_planned_instant_with_no_resync(env: Env) -> None:
    env.create_workload()
    # Peak in 18 minutes, leadTime 15m (policy_body): the floor is due in 2–3 minutes.
    env.put_forecast(forecast_json(peak_in="18m"))
    env.start_operator("--interval", "1h", "--observe-interval", "1h")
    env.create_policy(policy_body("p"))
    st = env.wait(lambda: (env.policy("p").get("status") or {}).get("nextChange"),
                  "status.nextChange")  # fmt: skip
    at = pd.Timestamp(st["at"])
    assert st["replicas"] == 7 and env.hpa().spec.min_replicas == BASELINE
    left = (at - pd.Timestamp.now(tz="UTC")).total_seconds()
    assert 15 < left < 240, st
    time.sleep(max(0.0, left - 8))
    assert env.hpa().spec.min_replicas == BASELINE, "raised before its planned instant"
    env.wait(min_replicas(env, 7), "the floor raised at nextChange.at", timeout=40)
    late = (pd.Timestamp.now(tz="UTC") - at).total_seconds()
    assert -1.0 <= late <= SLACK_S, f"raised {late:.1f}s after the planned {at}"


def test_an_input_change_acts_within_seconds_with_no_resync(env: Env) -> None:
    env.create_workload()
    env.put_forecast(forecast_json(peak=1.5))  # flat: floor = baseline
    env.start_operator("--interval", "1h", "--observe-interval", "1h")
    env.create_policy(policy_body("p"))
    env.wait(lambda: (env.policy("p").get("status") or {}).get("floor") == BASELINE,
             "status.floor at the baseline")  # fmt: skip
    began = time.monotonic()
    env.put_forecast(forecast_json())  # a peak inside leadTime: 7 at once
    env.wait(min_replicas(env, 7), "raised after the forecast change", timeout=15)
    assert time.monotonic() - began < 10
    # A hand edit of the HPA (its spec) wakes the policy through the HPA watch: the
    # edit above the floor is adopted as the new baseline (docs/policy.md).
    env.hpas.patch_namespaced_horizontal_pod_autoscaler(
        "web", env.namespace, {"spec": {"minReplicas": 9}})
    env.wait(lambda: (env.policy("p").get("status") or {}).get("baseline") == 9,
             "the hand edit adopted as the baseline", timeout=15)
