"""Issue #14 on the real control plane: bounds the API server and policy.py agree on,
restores under operator-wide --dry-run, a baseline recovered after its annotations
were stripped, and forecasts that fail safe without echoing their content.

Expected floors from docs/policy.md's rule, as in e2e/test_operator.py: load 1.5 at
perReplica 1 needs the baseline 2; the peak of 6.5 needs ceil(6.5) = 7.
"""

from __future__ import annotations

import json
import time
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from e2e.operator_env import (
    BASELINE,
    GROUP,
    PLURAL,
    VERSION,
    Env,
    forecast_json,
    min_replicas,
    policy_body,
)
from floorcast.durations import DURATION_PATTERN
from floorcast.policy import PolicyError, parse_policy

pytestmark = pytest.mark.e2e

ANNOTATIONS = ("floorcast.dev/baseline", "floorcast.dev/applied-floor", "floorcast.dev/policy")


def ours(env: Env) -> dict[str, str]:
    return {k: v for k, v in (env.hpa().metadata.annotations or {}).items()
            if k.startswith("floorcast.dev/")}  # fmt: skip


def raised(env: Env, *flags: str) -> None:
    env.create_workload()
    env.put_forecast(forecast_json())
    env.start_operator(*flags)
    env.create_policy(policy_body("p"))
    env.wait(min_replicas(env, 7), "HPA minReplicas raised to 7")
    env.wait(lambda: (env.policy("p").get("status") or {}).get("floor") == 7, "status.floor 7")


def gone(env: Env, name: str = "p") -> bool:
    try:
        env.policy(name)
    except ApiException as e:
        return e.status == 404
    return False


# ------------------------------------------------------------- item 2: bounds agree

#: Values at and around every bound, and the issue's own values; hypothesis mixes them
#: with arbitrary strings of the duration pattern and arbitrary numbers.
EDGE_DURATIONS = [
    "168h", "168h1ms", "167h59m59.999999999s", "604800s", "604800.000000001s",
    "10080m", "10080.0000000000001m", "168.0000000000000001h", "0s", "0.0000001ms",
    "0.000001ms", "99999999999999h", "9999999999h", "2562047h47m16.854775807s",
    "2562047h47m16.854775808s", "1" + "0" * 30 + "ms", "1s" * 32, "1s" * 33,
]  # fmt: skip
DURATIONS = st.one_of(st.sampled_from(EDGE_DURATIONS),
                      st.from_regex(DURATION_PATTERN, fullmatch=True))  # fmt: skip
NUMBERS = st.one_of(
    st.sampled_from([0, 0.0, 5e-324, 1e-300, 1, 0.9999999999999999, 1.0000000000000002, 10,
                     10.000000000000002, 1000, 1000.0000000000001,
                     1e12, 1.0000000000000002e12, 1e300, -1]),
    st.floats(allow_nan=False, allow_infinity=False),
    st.integers(min_value=-(2**53), max_value=2**53),
)  # fmt: skip
REPLICAS = st.one_of(st.sampled_from([0, 1, 2**31 - 1, 2**31, 2**53]),
                     st.integers(min_value=-(2**40), max_value=2**40))  # fmt: skip


@st.composite
def specs(draw: Any) -> dict[str, Any]:
    spec: dict[str, Any] = {
        "targetRef": {"name": "web"},
        "forecast": {"configMapRef": {"name": "fc", "key": "f.json"}},
        "capacity": {"perReplica": 1},
    }
    which = draw(st.sets(st.sampled_from(["leadTime", "holdTime", "maxAge", "headroom",
                                          "perReplica", "factor", "minReplicas",
                                          "maxReplicas", "halfLife", "correctionMin",
                                          "correctionMax"]), min_size=1, max_size=3))  # fmt: skip
    for f in which:
        if f in ("leadTime", "holdTime"):
            spec[f] = draw(DURATIONS)
        elif f == "maxAge":
            spec["forecast"]["maxAge"] = draw(DURATIONS)
        elif f == "headroom":
            spec[f] = draw(NUMBERS)
        elif f == "perReplica":
            spec["capacity"] = {"perReplica": draw(NUMBERS)}
        elif f == "factor":
            spec["plannedEvents"] = [{"name": "sale", "start": "2026-12-01T10:00:00Z",
                                      "end": "2026-12-01T11:00:00Z",
                                      "factor": draw(NUMBERS)}]  # fmt: skip
        elif f == "halfLife":
            spec.setdefault("liveCorrection", {})["halfLife"] = draw(DURATIONS)
        elif f == "correctionMin":
            spec.setdefault("liveCorrection", {})["min"] = draw(NUMBERS)
        elif f == "correctionMax":
            spec.setdefault("liveCorrection", {})["max"] = draw(NUMBERS)
        else:
            spec[f] = draw(REPLICAS)
    return spec


def test_what_the_api_server_accepts_policy_py_accepts(api_client, operator_cluster,
                                                       namespace) -> None:  # fmt: skip
    """Both directions: the server's verdict (a server-side dry-run create, which runs
    the schema, the maximums and the CEL rules) equals policy.py's on every input."""
    custom = k8s.CustomObjectsApi(api_client)
    tried: list[bool] = []

    @settings(max_examples=300, deadline=None, derandomize=True,
              suppress_health_check=list(HealthCheck))  # fmt: skip
    @given(specs())
    def check(spec: dict[str, Any]) -> None:
        body = {"apiVersion": f"{GROUP}/{VERSION}", "kind": "ForecastScalingPolicy",
                "metadata": {"name": "probe", "namespace": namespace}, "spec": spec}  # fmt: skip
        try:
            custom.create_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL, body,
                                                   dry_run="All")  # fmt: skip
            server, why = True, ""
        except ApiException as e:
            assert e.status in (400, 422), e
            server, why = False, json.loads(e.body or "{}").get("message", "")[:300]
        try:
            parse_policy(body, source="probe")
            local, problem = True, ""
        except PolicyError as e:
            local, problem = False, str(e)
        tried.append(server)
        assert server == local, (f"API server {'accepts' if server else 'refuses'} "
                                 f"({why}) but policy.py {'accepts' if local else 'refuses'} "
                                 f"({problem}): {json.dumps(spec)}")  # fmt: skip

    # Every edge value in every duration field, deterministically, before the random ones.
    for value in EDGE_DURATIONS:
        for field in ("leadTime", "holdTime", "maxAge", "halfLife"):
            base: dict[str, Any] = {"targetRef": {"name": "web"}, "capacity": {"perReplica": 1},
                                    "forecast": {"configMapRef": {"name": "fc", "key": "k"}}}
            if field == "maxAge":
                base["forecast"]["maxAge"] = value
            elif field == "halfLife":
                base["liveCorrection"] = {"halfLife": value}
            else:
                base[field] = value
            check.hypothesis.inner_test(base)  # type: ignore[attr-defined]
    check()
    print(f"policy bounds: {len(tried)} specs tried against the API server, "
          f"{sum(tried)} accepted, {len(tried) - sum(tried)} refused")
    assert sum(tried) > 20 and len(tried) - sum(tried) > 20  # both sides were exercised


def test_the_issue_hold_time_is_refused_by_the_api_server(env: Env) -> None:
    raised(env)
    for bad in ("99999999999999h", "9999999999h", "169h"):
        with pytest.raises(ApiException) as caught:
            env.custom.patch_namespaced_custom_object(GROUP, VERSION, env.namespace, PLURAL,
                                                      "p", {"spec": {"holdTime": bad}})  # fmt: skip
        assert caught.value.status == 422 and "holdTime" in caught.value.body
    env.custom.delete_namespaced_custom_object(GROUP, VERSION, env.namespace, PLURAL, "p")
    env.wait(min_replicas(env, BASELINE), "baseline restored on delete")
    env.wait(lambda: gone(env), "the policy to be gone")


# ---------------------------------------------------- item 1: restores under --dry-run


@pytest.mark.parametrize("how", ["delete", "lost-forecast"])
def test_operator_dry_run_still_restores_a_floor_raised_before(env: Env, how: str) -> None:
    raised(env)
    env.stop_all()
    env.start_operator("--dry-run")
    if how == "delete":
        env.custom.delete_namespaced_custom_object(GROUP, VERSION, env.namespace, PLURAL, "p")
        env.wait(min_replicas(env, BASELINE), "baseline restored on delete under --dry-run")
        env.wait(lambda: gone(env), "the delete to complete (finalizer removed)")
    else:
        k8s.CoreV1Api(env.api).delete_namespaced_config_map("web-forecast", env.namespace)
        env.wait(min_replicas(env, BASELINE), "baseline restored without a forecast")
        env.wait(lambda: (env.condition("p") or {}).get("reason") == "ForecastMissing",
                 "Ready reason ForecastMissing")  # fmt: skip
    assert ours(env) == {}
    assert env.events("BaselineRestored")
    # ...and --dry-run raises nothing.
    time.sleep(5)
    assert env.hpa().spec.min_replicas == BASELINE


# ------------------------------------------------------------ item 5: durable baseline


def test_stripped_annotations_recover_the_baseline_from_status(env: Env) -> None:
    raised(env)
    strip = {"metadata": {"annotations": {k: None for k in ANNOTATIONS}}}
    env.hpas.patch_namespaced_horizontal_pod_autoscaler("web", env.namespace, strip)
    # The operator puts them back with the owner's baseline, not the raised 7.
    env.wait(lambda: ours(env).get("floorcast.dev/baseline") == "2", "baseline 2 recovered")
    assert env.hpa().spec.min_replicas == 7
    ev = env.wait(lambda: env.events("BaselineRecovered"), "a BaselineRecovered Event")
    assert "status.baseline" in ev[0].message
    assert env.policy("p")["status"]["baseline"] == BASELINE
    env.custom.delete_namespaced_custom_object(GROUP, VERSION, env.namespace, PLURAL, "p")
    env.wait(min_replicas(env, BASELINE), "the recovered baseline restored on delete")


# ----------------------------------------- items 3 and 6: bad forecasts fail safe, quietly


@pytest.mark.parametrize("bad", ["nested", "huge-step", "secret-header"])
def test_bad_forecast_restores_and_does_not_echo_it(env: Env, bad: str) -> None:
    raised(env)
    secret = "s3cr3t-token-from-the-configmap"
    text = {
        "nested": '{"meta": ' + "[" * 50_000 + "]" * 50_000 + ', "points": []}',
        "huge-step": json.dumps({"step": "99999999999h", "points": [
            {"t": "2026-12-01T00:00:00Z", "value": 1}]}),
        "secret-header": f"{secret},value\n2026-12-01T00:00:00Z,1\n",
    }[bad]
    env.put_forecast(text)
    env.wait(min_replicas(env, BASELINE), f"baseline restored ({bad})")
    cond = env.wait(lambda: (c := env.condition("p")) and c["reason"] == "ForecastInvalid" and c,
                    "Ready reason ForecastInvalid")  # fmt: skip
    assert secret not in cond["message"] and "s3cr3t" not in json.dumps(env.policy("p"))
    assert cond["message"].startswith(f"ConfigMap {env.namespace}/web-forecast key f.json")


# ------------------------------------------- item 4: a tenant cannot take the operator down


def _chart_memory_limit_mib() -> float:
    import yaml

    from e2e.operator_env import ROOT

    values = yaml.safe_load((ROOT / "charts" / "floorcast" / "values.yaml").read_text())
    text = values["resources"]["limits"]["memory"]
    assert text.endswith("Mi"), text
    return float(text[:-2])


def _worst_forecast() -> str:
    """As large as a ConfigMap forecast may be (just under 1 MiB) at a 1 ms step, so
    that a 168 h holdTime spans 6e8 steps: before the window bound this one policy
    allocated gigabytes. It starts a moment ago and covers about 20 s."""
    import pandas as pd

    start = pd.Timestamp.now(tz="UTC").floor("s") - pd.Timedelta("2s")
    t0 = start.strftime("%Y-%m-%dT%H:%M:%S")
    pts = []
    size = 200
    for i in range(100_000):
        p = f'{{"t": "{t0}.{i % 1000:03d}Z", "value": 1e300}}'
        if i >= 1000:  # past the first second: write whole instants
            sec = start + pd.Timedelta(milliseconds=i)
            p = f'{{"t": "{sec.strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3]}Z", "value": 1e300}}'
        size += len(p) + 2
        if size > 1_000_000:
            break
        pts.append(p)
    gen = start.strftime("%Y-%m-%dT%H:%M:%SZ")
    return f'{{"step": "1ms", "generated": "{gen}", "points": [' + ", ".join(pts) + "]}"


def _peak_rss_mib(pid: int) -> float:
    with open(f"/proc/{pid}/status") as f:
        for line in f:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    raise AssertionError("no VmHWM")


def test_the_worst_legal_tenant_leaves_memory_in_bounds_and_others_reconciling(env: Env) -> None:
    limit = _chart_memory_limit_mib()
    raised(env)  # the well-behaved tenant: web, floor 7
    proc = env.procs[-1]
    core = k8s.CoreV1Api(env.api)
    for i in range(3):
        name = f"big{i}"
        env.create_workload(name)
        text = _worst_forecast()  # fresh: it covers only the next ~18 s
        assert 900_000 < len(text) <= 1_000_000
        core.create_namespaced_config_map(env.namespace, {
            "metadata": {"name": f"{name}-fc", "labels": {"floorcast.dev/forecast": "true"}},
            "data": {"f.json": text}})  # fmt: skip
        body = policy_body(name, target=name,
                           forecast={"configMapRef": {"name": f"{name}-fc", "key": "f.json"},
                                     "maxAge": "168h"})  # fmt: skip
        body["spec"].update({"leadTime": "1s", "holdTime": "168h", "headroom": 10,
                             "plannedEvents": [{"name": f"e{j}", "start": "2026-01-01T00:00:00Z",
                                                "end": "2036-01-01T00:00:00Z", "factor": 1000}
                                               for j in range(100)]})  # fmt: skip
        env.create_policy(body)
    for i in range(3):  # each was planned: a need of 1e300 × 11 × 1000 is the ceiling
        env.wait(lambda i=i: env.hpa(f"big{i}").spec.min_replicas == 10,
                 f"big{i} raised to its HPA's maxReplicas")  # fmt: skip
    # The other tenant still reconciles: a new peak moves its floor.
    env.put_forecast(forecast_json(peak=8.5))
    env.wait(min_replicas(env, 9), "the well-behaved policy follows its new forecast (9)")
    peak = _peak_rss_mib(proc.pid)
    print(f"operator peak RSS {peak:.0f} MiB with 3 worst-case tenants (chart limit {limit:.0f})")
    assert proc.poll() is None and peak < limit


# ------------------------------------------- item 10: GitOps tools and floorcast's field


def test_server_side_apply_without_min_replicas_keeps_floorcasts_value(env: Env) -> None:
    env.put_forecast(forecast_json())
    manifest = {
        "apiVersion": "autoscaling/v2", "kind": "HorizontalPodAutoscaler",
        "metadata": {"name": "web", "namespace": env.namespace},
        "spec": {"scaleTargetRef": {"apiVersion": "apps/v1", "kind": "Deployment",
                                    "name": "web"},
                 "minReplicas": BASELINE, "maxReplicas": 10},
    }  # fmt: skip

    def apply(doc: dict[str, Any]) -> None:
        env.hpas.patch_namespaced_horizontal_pod_autoscaler(
            "web", env.namespace, doc, field_manager="gitops-owner",
            _content_type="application/apply-patch+yaml")  # fmt: skip

    apply(manifest)
    env.start_operator()
    env.create_policy(policy_body("p"))
    env.wait(min_replicas(env, 7), "HPA minReplicas raised to 7")
    owners = {m.manager: json.dumps(m.fields_v1) for m in env.hpa().metadata.managed_fields}
    assert '"f:minReplicas"' in owners["floorcast"]
    assert '"f:minReplicas"' not in owners.get("gitops-owner", "")
    # The owner's manifest with minReplicas left out (as docs/operations.md advises):
    # a re-sync keeps floorcast's value, and our annotations.
    without = json.loads(json.dumps(manifest))
    del without["spec"]["minReplicas"]
    apply(without)
    apply(without)
    time.sleep(5)  # two operator ticks
    assert env.hpa().spec.min_replicas == 7
    assert ours(env)["floorcast.dev/baseline"] == str(BASELINE)
    assert env.hpa().spec.max_replicas == 10  # the owner's fields stay the owner's
