"""The operator's operational surface on the real control plane: metrics, liveness, JSON
logs, operator-wide ``--dry-run``, and switching a policy from Enforce to DryRun.

Expected floors as in test_operator.py (docs/policy.md's floor rule): load 1.5 at
perReplica 1 needs the baseline 2; a peak of 6.5 within leadTime needs ceil(6.5) = 7.
"""

from __future__ import annotations

import json
import socket
import time
import urllib.request

import pytest
from prometheus_client.parser import text_string_to_metric_families

from e2e.operator_env import (
    BASELINE,
    Env,
    forecast_json,
    min_replicas,
    policy_body,
)

pytestmark = pytest.mark.e2e
METRICS = (
    "floorcast_floor_replicas",
    "floorcast_baseline_replicas",
    "floorcast_forecast_age_seconds",
    "floorcast_hpa_patches_total",
    "floorcast_reconcile_errors_total",
    "floorcast_reconcile_duration_seconds",
)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def scrape(port: int) -> dict[str, list]:
    """Family name -> samples, parsed with prometheus_client's own text parser."""
    with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=5) as r:
        text = r.read().decode()
    return {f.name: f.samples for f in text_string_to_metric_families(text)}


def sample(fams: dict[str, list], name: str, **labels: str) -> float | None:
    for s in (s for samples in fams.values() for s in samples):
        if s.name == name and all(s.labels.get(k) == v for k, v in labels.items()):
            return s.value
    return None


def annotations(env: Env) -> dict[str, str]:
    return {k: v for k, v in (env.hpa().metadata.annotations or {}).items()
            if k.startswith("floorcast.dev/")}  # fmt: skip


def test_metrics_liveness_and_json_logs(env: Env) -> None:
    mport, lport = free_port(), free_port()
    env.create_workload()
    env.put_forecast(forecast_json())
    # Later flags win in click, overriding the helper's "--metrics-port 0".
    env.start_operator("--metrics-port", str(mport), "--liveness-port", str(lport),
                       "--log-format", "json")  # fmt: skip
    env.create_policy(policy_body("p"))
    env.wait(min_replicas(env, 7), "HPA minReplicas raised to 7")
    labels = {"namespace": env.namespace, "policy": "p"}

    fams = env.wait(lambda: (f := scrape(mport)) and
                    sample(f, "floorcast_floor_replicas", **labels) == 7 and f,
                    "floor gauge 7 on /metrics")  # fmt: skip
    # The parser names a counter's family without "_total" (OpenMetrics); a labelled
    # counter never incremented has HELP/TYPE but no sample (errors: none expected here).
    assert {m.removesuffix("_total") for m in METRICS} <= set(fams), sorted(fams)
    assert sample(fams, "floorcast_baseline_replicas", **labels) == BASELINE
    assert sample(fams, "floorcast_hpa_patches_total", **labels) == 1  # one raise, one patch
    age = sample(fams, "floorcast_forecast_age_seconds", **labels)
    assert age is not None and 0 <= age < 600  # generated "now" (floored to the minute)
    count = sample(fams, "floorcast_reconcile_duration_seconds_count")
    assert count is not None and count >= 1

    # A second raise (peak 8.5 needs 9) is a second patch: the counter increments.
    env.put_forecast(forecast_json(peak=8.5))
    env.wait(min_replicas(env, 9), "HPA minReplicas raised to 9")
    # The counter moves when the patch is sent, the gauge after the reconcile ends:
    # wait for both rather than race between them.
    fams = env.wait(lambda: (f := scrape(mport)) and
                    sample(f, "floorcast_hpa_patches_total", **labels) == 2 and
                    sample(f, "floorcast_floor_replicas", **labels) == 9 and f,
                    "patch counter at 2 and floor gauge at 9")  # fmt: skip
    assert sample(fams, "floorcast_hpa_patches_total", **labels) == 2

    # kopf's liveness endpoint: 200 with a JSON body while the operator runs.
    with urllib.request.urlopen(f"http://127.0.0.1:{lport}/healthz", timeout=5) as r:
        assert r.status == 200
        json.loads(r.read())

    env.stop_all()
    lines = [ln for ln in env.operator_log().splitlines() if ln.strip()]
    assert any("Enforce floor 7" in ln for ln in lines), lines[-20:]
    bad = []
    for ln in lines:
        try:
            assert isinstance(json.loads(ln), dict)
        except (ValueError, AssertionError):
            bad.append(ln)
    assert not bad, bad[:5]


def test_operator_wide_dry_run_never_writes_the_hpa(env: Env) -> None:
    env.create_workload()
    env.put_forecast(forecast_json())
    env.wait(lambda: env.hpa().status.conditions, "HPA controller to report conditions")
    before = env.hpa().metadata.resource_version
    env.start_operator("--dry-run")
    env.create_policy(policy_body("p", mode="Enforce"))
    env.wait(lambda: (env.policy("p").get("status") or {}).get("proposedFloor") == 7,
             "status.proposedFloor 7")  # fmt: skip
    applied = env.condition("p", "Applied")
    assert applied["reason"] == "DryRun" and "--dry-run" in applied["message"]
    time.sleep(5)  # two more timer ticks (2 s)
    h = env.hpa()
    assert h.metadata.resource_version == before
    assert h.spec.min_replicas == BASELINE and annotations(env) == {}


def test_switching_enforce_to_dry_run_restores_the_baseline(env: Env) -> None:
    env.create_workload()
    env.put_forecast(forecast_json())
    env.start_operator()
    env.create_policy(policy_body("p"))
    env.wait(min_replicas(env, 7), "HPA minReplicas raised to 7")
    assert annotations(env)["floorcast.dev/baseline"] == str(BASELINE)
    env.custom.patch_namespaced_custom_object("floorcast.dev", "v1alpha1", env.namespace,
                                              "forecastscalingpolicies", "p",
                                              {"spec": {"mode": "DryRun"}})  # fmt: skip
    env.wait(min_replicas(env, BASELINE), "baseline restored on the switch to DryRun")
    assert annotations(env) == {}
    st = env.wait(lambda: (env.policy("p").get("status") or {}).get("proposedFloor") == 7
                  and env.policy("p")["status"], "status.proposedFloor 7")  # fmt: skip
    assert env.condition("p", "Applied")["reason"] == "DryRun"
    assert st["baseline"] == BASELINE
    env.wait(lambda: env.events("BaselineRestored"), "a BaselineRestored Event")
