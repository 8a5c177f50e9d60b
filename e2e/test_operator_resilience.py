"""Crash consistency and API-server restarts, with a real `floorcast run` process."""

from __future__ import annotations

import signal
import time

import pytest

from e2e.controlplane.runner import ControlPlane
from e2e.operator_env import (
    BASELINE,
    Env,
    forecast_json,
    min_replicas,
    policy_body,
)

pytestmark = pytest.mark.e2e
FAULT = {"FLOORCAST_FAULT_KILL_AFTER_HPA_PATCH": "1"}


def test_sigkill_between_hpa_patch_and_status_converges(env: Env) -> None:
    env.create_workload()
    env.put_forecast(forecast_json())
    crashing = env.start_operator(env=FAULT)
    env.create_policy(policy_body("p"))
    assert crashing.wait(60) == -signal.SIGKILL
    # The HPA was patched, the status never written: the HPA's annotations hold the truth.
    h = env.hpa()
    assert h.spec.min_replicas == 7
    assert h.metadata.annotations["floorcast.dev/baseline"] == str(BASELINE)
    assert "floor" not in (env.policy("p").get("status") or {})

    env.start_operator()
    st = env.wait(lambda: (env.policy("p").get("status") or {}).get("floor") == 7
                  and env.policy("p")["status"], "status written after restart")  # fmt: skip
    assert st["baseline"] == BASELINE  # not 7: the baseline survived the crash
    h = env.hpa()
    assert h.spec.min_replicas == 7
    assert h.metadata.annotations["floorcast.dev/baseline"] == str(BASELINE)


def test_apiserver_restart_does_not_wedge_the_operator(env: Env, control_plane) -> None:
    if not isinstance(control_plane, ControlPlane):
        pytest.skip("needs the local control plane to restart kube-apiserver")
    env.create_workload()
    env.put_forecast(forecast_json())
    proc = env.start_operator()
    env.create_policy(policy_body("p"))
    env.wait(min_replicas(env, 7), "HPA raised to 7")
    control_plane.restart_apiserver()
    env.wait(lambda: env.hpa(), "API server back", timeout=60)
    # Someone resets the HPA by hand (dropping our annotations); the timer (2 s) must
    # notice within two intervals once the API is back. Allow scheduling slack.
    env.hpas.patch_namespaced_horizontal_pod_autoscaler("web", env.namespace, {
        "metadata": {"annotations": {"floorcast.dev/baseline": None,
                                     "floorcast.dev/applied-floor": None,
                                     "floorcast.dev/policy": None}},
        "spec": {"minReplicas": BASELINE},
    })  # fmt: skip
    started = time.monotonic()
    env.wait(min_replicas(env, 7), "floor re-applied after the restart", timeout=20)
    took = time.monotonic() - started
    assert proc.poll() is None, "the operator is still running"
    assert took <= 2 * 2 + 2, f"re-applied after {took:.1f}s"
