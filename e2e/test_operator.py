"""The operator on the real control plane: raise, dry-run, delete, fall back, adopt, refuse.

Expected floors from docs/policy.md's rule: load 1.5 at perReplica 1 and headroom 0 needs
2 replicas (the baseline); a peak of 6.5 ten minutes ahead is inside leadTime 15m and
needs ceil(6.5) = 7.
"""

from __future__ import annotations

import threading
import time
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import pandas as pd
import pytest
from kubernetes import client as k8s

from e2e.operator_env import (
    BASELINE,
    Env,
    forecast_json,
    min_replicas,
    policy_body,
)

pytestmark = pytest.mark.e2e


def annotations(env: Env) -> dict[str, str]:
    return {k: v for k, v in (env.hpa().metadata.annotations or {}).items()
            if k.startswith("floorcast.dev/")}  # fmt: skip


def raised(env: Env, name: str = "p") -> None:
    env.create_workload()
    env.put_forecast(forecast_json())
    env.start_operator()
    env.create_policy(policy_body(name))
    env.wait(min_replicas(env, 7), "HPA minReplicas raised to 7")


def test_enforce_raises_floor_and_hpa_scales_deployment_then_delete_restores(
        env: Env, control_plane) -> None:  # fmt: skip
    raised(env)
    assert annotations(env) == {"floorcast.dev/baseline": "2", "floorcast.dev/applied-floor": "7",
                                "floorcast.dev/policy": "p"}  # fmt: skip
    assert env.hpa().spec.max_replicas == 10  # never touched
    apps = k8s.AppsV1Api(env.api)
    env.wait(lambda: apps.read_namespaced_deployment("web", env.namespace).spec.replicas == 7,
             "the real HPA controller scales the Deployment to 7")  # fmt: skip
    st = env.wait(lambda: (env.policy("p").get("status") or {}).get("floor") == 7 and
                  env.policy("p")["status"], "status.floor 7")  # fmt: skip
    assert st["baseline"] == BASELINE
    assert env.condition("p")["status"] == "True"
    assert env.events("FloorRaised"), "an Event for the raise"
    # The decision explains itself (docs/policy.md, "Why this floor"), by hand: the peak
    # 6.5 cores × (1 + 0) / perReplica 1 = 6.5 → 7; in the Event, status and describe.
    why = "value 6.5 cores in the 1m from "
    msg = env.events("FloorRaised")[-1].message
    assert "; why: " + why in msg and msg.endswith("= 6.5 → 7 replicas → floor 7"), msg
    assert st["explanation"].startswith(why) and st["explanation"] in msg
    described = control_plane.kubectl("describe", "fsp", "p", "-n", env.namespace).stdout
    assert "why: " + why in " ".join(described.split()), described  # the decision record
    # Idle: two more timer ticks (2 s) write nothing to the policy.
    rv = env.policy("p")["metadata"]["resourceVersion"]
    before = env.policy("p")
    time.sleep(5)
    after = env.policy("p")
    assert after["metadata"]["resourceVersion"] == rv, (before, after)

    env.custom.delete_namespaced_custom_object("floorcast.dev", "v1alpha1", env.namespace,
                                               "forecastscalingpolicies", "p")  # fmt: skip
    env.wait(min_replicas(env, BASELINE), "baseline restored on delete")
    assert annotations(env) == {}

    def gone() -> bool:
        try:
            env.policy("p")
        except k8s.ApiException as e:
            return e.status == 404
        return False

    env.wait(gone, "the policy to be gone (finalizer removed)")


def test_dry_run_leaves_hpa_untouched_and_reports_proposal(env: Env) -> None:
    env.create_workload()
    env.put_forecast(forecast_json())
    # The HPA controller writes the HPA's status while it settles; wait for quiet.
    env.wait(lambda: env.hpa().status.conditions, "HPA controller to report conditions")
    before = env.hpa().metadata.resource_version
    env.start_operator()
    env.create_policy(policy_body("p", mode="DryRun"))
    env.wait(lambda: (env.policy("p").get("status") or {}).get("proposedFloor") == 7,
             "status.proposedFloor 7")  # fmt: skip
    ev = env.wait(lambda: env.events("DryRun"), "a DryRun Event")
    assert ev[0].message.startswith("would set minReplicas 2 → 7 (peak at "), ev[0].message
    assert env.condition("p", "Applied")["reason"] == "DryRun"
    assert "floor" not in env.policy("p")["status"]
    time.sleep(5)  # two more timer ticks: still nothing written
    h = env.hpa()
    assert h.metadata.resource_version == before
    assert h.spec.min_replicas == BASELINE and annotations(env) == {}


@pytest.mark.parametrize("bad", ["stale", "ends-too-soon", "malformed"])
def test_stale_or_malformed_forecast_restores_baseline(env: Env, bad: str) -> None:
    raised(env)
    if bad == "stale":  # generated longer ago than maxAge (6h)
        old = pd.Timestamp.now(tz="UTC") - pd.Timedelta("7h")
        env.put_forecast(forecast_json(generated=old))
        reason = "ForecastStale"
    elif bad == "ends-too-soon":  # 18 minutes from now − 10m: ends before now + leadTime 15m
        env.put_forecast(forecast_json(hours=0.3))
        reason = "ForecastStale"
    else:
        env.put_forecast('{"unit": "cores", "points": [oops')
        reason = "ForecastInvalid"
    env.wait(min_replicas(env, BASELINE), f"baseline restored ({reason})")
    assert annotations(env) == {}
    env.wait(lambda: (env.condition("p") or {}).get("reason") == reason, f"Ready reason {reason}")
    assert env.condition("p", "ForecastAvailable")["status"] == "False"


def test_hand_edit_becomes_new_baseline(env: Env) -> None:
    raised(env)
    env.hpas.patch_namespaced_horizontal_pod_autoscaler("web", env.namespace,
                                                        {"spec": {"minReplicas": 4}})  # fmt: skip
    env.wait(lambda: annotations(env).get("floorcast.dev/baseline") == "4", "baseline 4 adopted")
    env.wait(min_replicas(env, 7), "the floor (7 > 4) back in force")
    env.wait(lambda: env.events("BaselineAdopted"), "a BaselineAdopted Event")
    env.wait(lambda: env.policy("p")["status"].get("baseline") == 4, "status.baseline 4")


def test_two_policies_on_one_hpa_conflict(env: Env) -> None:
    raised(env, "first")
    # The later policy would set 10 (peak 9.5) if it wrote at all, so a write shows.
    env.put_forecast(forecast_json(peak=9.5), name="second-forecast")
    env.create_policy(policy_body("second", forecast={
        "configMapRef": {"name": "second-forecast", "key": "f.json"}}))  # fmt: skip
    c = env.wait(lambda: (env.condition("second") or {}).get("reason") == "TargetConflict"
                 and env.condition("second"), "TargetConflict on the later policy")  # fmt: skip
    assert c["status"] == "False" and "first" in c["message"]
    for _ in range(6):  # three 2 s timer ticks of both policies
        h = env.hpa()
        assert h.spec.min_replicas == 7, h.spec
        assert h.metadata.annotations.get("floorcast.dev/policy") == "first"
        time.sleep(1)
    env.wait(lambda: (env.condition("first") or {}).get("status") == "True", "first is Ready")
    assert annotations(env)["floorcast.dev/policy"] == "first"


def test_url_outside_allow_list_is_refused(env: Env) -> None:
    """Raised from a ConfigMap first, then re-pointed at a URL outside the allow-list:
    refused, never fetched, and the floor it had raised is restored."""
    env.create_workload()
    env.put_forecast(forecast_json())
    env.start_operator("--allow-url-host", "forecasts.example.test")
    env.create_policy(policy_body("p"))
    env.wait(min_replicas(env, 7), "HPA minReplicas raised to 7")
    env.custom.patch_namespaced_custom_object(
        "floorcast.dev", "v1alpha1", env.namespace, "forecastscalingpolicies", "p",
        {"spec": {"forecast": {"configMapRef": None,
                               "url": "http://10.0.0.1:9/forecast.json"}}},
    )  # fmt: skip
    c = env.wait(lambda: (env.condition("p") or {}).get("reason") == "UrlNotAllowed"
                 and env.condition("p"), "UrlNotAllowed")  # fmt: skip
    assert "10.0.0.1" in c["message"]
    env.wait(min_replicas(env, BASELINE), "the raised floor restored to the baseline")
    assert annotations(env) == {}


def test_url_forecast_from_an_allowed_host_raises_and_is_fetched_conditionally(env: Env) -> None:
    """A real HTTP server on 127.0.0.1 (where the operator process runs) serves the
    forecast with an ETag; the operator raises the floor, and its timer's re-fetches
    are conditional GETs answered 304 (RFC 9110 section 13.1.2)."""
    body, seen = forecast_json().encode(), []

    class Handler(BaseHTTPRequestHandler):
        def do_GET(self) -> None:  # the stdlib's name
            seen.append(self.headers.get("If-None-Match"))
            if self.headers.get("If-None-Match") == '"f1"':
                self.send_response(304)
                self.end_headers()
                return
            self.send_response(200)
            self.send_header("ETag", '"f1"')
            self.send_header("Content-Length", str(len(body)))
            self.end_headers()
            self.wfile.write(body)

        def log_message(self, *_: object) -> None:
            pass

    httpd = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    threading.Thread(target=httpd.serve_forever, daemon=True).start()
    try:
        env.create_workload()
        env.start_operator("--allow-url-host", "127.0.0.1")
        url = f"http://127.0.0.1:{httpd.server_address[1]}/forecasts/web.json?token=s3cret"
        env.create_policy(policy_body("p", forecast={"url": url}))
        env.wait(min_replicas(env, 7), "HPA minReplicas raised to 7 from the URL forecast")
        env.wait(lambda: seen.count('"f1"') >= 2, "two conditional re-fetches on the 2 s timer")
        assert seen[0] is None  # the first fetch had nothing to validate against
        assert env.condition("p")["status"] == "True"
        assert env.hpa().spec.min_replicas == 7  # the 304s kept the same forecast
        assert "s3cret" not in str(env.policy("p").get("status"))
    finally:
        httpd.shutdown()
        httpd.server_close()


def test_forecast_configmap_change_acts_promptly_without_waiting_for_the_timer(env: Env) -> None:
    env.create_workload()
    env.put_forecast(forecast_json(peak=1.5))  # flat: floor = baseline
    env.start_operator("--interval", "300s")
    env.create_policy(policy_body("p"))
    env.wait(lambda: (env.condition("p") or {}).get("status") == "True", "Ready")
    assert env.hpa().spec.min_replicas == BASELINE
    started = time.monotonic()
    env.put_forecast(forecast_json(peak=8.5))  # needs 9
    env.wait(min_replicas(env, 9), "floor raised after the ConfigMap change", timeout=15)
    assert time.monotonic() - started < 10  # the timer is 300 s: this was the watch


def test_an_unlabelled_forecast_configmap_works_and_the_condition_says_why_it_is_slower(
    env: Env,
) -> None:
    env.create_workload()
    k8s.CoreV1Api(env.api).create_namespaced_config_map(env.namespace, {
        "metadata": {"name": "web-forecast"}, "data": {"f.json": forecast_json()}})  # fmt: skip
    env.start_operator()
    env.create_policy(policy_body("p"))
    env.wait(min_replicas(env, 7), "HPA minReplicas raised from an unlabelled ConfigMap")
    c = env.wait(lambda: env.condition("p", "ForecastAvailable"), "ForecastAvailable")
    assert c["status"] == "True" and "not labelled floorcast.dev/forecast=true" in c["message"]
