"""The ForecastScalingPolicy CRD on a real API server: defaults, CEL rules, columns.

The unit test (tests/test_crd.py) holds the CRD and policy.py together on paper; this
one proves the API server itself applies the defaults and refuses what policy.py
refuses, with the CRD exactly as shipped in crds/.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from e2e.helpers import eventually
from e2e.test_operator_hardening import DURATIONS, NUMBERS
from floorcast.policy import PolicyError, parse_policy, spec_defaults

CRD = Path(__file__).resolve().parents[1] / "crds" / "forecastscalingpolicies.floorcast.dev.yaml"
GROUP, VERSION, PLURAL = "floorcast.dev", "v1alpha1", "forecastscalingpolicies"


@pytest.fixture(scope="module")
def crd_installed(control_plane) -> None:
    control_plane.kubectl("apply", "-f", str(CRD))
    control_plane.kubectl(
        "wait", "--for=condition=Established", "--timeout=60s",
        "crd/forecastscalingpolicies.floorcast.dev",
    )  # fmt: skip


def policy(name: str, **spec: Any) -> dict[str, Any]:
    body: dict[str, Any] = {
        "targetRef": {"name": "web"},
        "forecast": {"configMapRef": {"name": "web-forecast", "key": "forecast.json"}},
        "capacity": {"perReplica": 0.5},
    }
    body.update(spec)
    return {
        "apiVersion": f"{GROUP}/{VERSION}",
        "kind": "ForecastScalingPolicy",
        "metadata": {"name": name},
        "spec": body,
    }


def create(api_client: k8s.ApiClient, namespace: str, obj: dict[str, Any]) -> dict[str, Any]:
    api = k8s.CustomObjectsApi(api_client)
    return api.create_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL, obj)


def test_api_server_fills_the_same_defaults_as_policy_py(crd_installed, api_client, namespace):
    got = create(api_client, namespace, policy("minimal"))
    spec = got["spec"]
    defaults = spec_defaults()
    for key in ("leadTime", "holdTime", "headroom", "useUpperBound", "mode"):
        assert spec[key] == defaults[key], key
    assert spec["forecast"]["maxAge"] == defaults["forecast"]["maxAge"]
    # What the API server returns, policy.py accepts and reads the same way.
    parsed = parse_policy(got, source="api")
    assert parsed.namespace == namespace and parsed.spec.mode == "DryRun"


@pytest.mark.parametrize(
    ("spec", "message"),
    [
        ({"forecast": {}}, "exactly one of forecast.configMapRef or forecast.url"),
        (
            {"forecast": {"url": "https://f.example/x",
                          "configMapRef": {"name": "a", "key": "b"}}},
            "exactly one of forecast.configMapRef or forecast.url",
        ),
        ({"capacity": {}}, "exactly one of capacity.perReplica or capacity.fromHPA"),
        ({"capacity": {"perReplica": 1, "fromHPA": True}}, "exactly one of capacity.perReplica"),
        ({"minReplicas": 5, "maxReplicas": 2}, "maxReplicas must be >= minReplicas"),
        ({"leadTime": "0s"}, "leadTime must be greater than zero"),
        ({"leadTime": "1d"}, "spec.leadTime"),
        ({"headroom": -0.5}, "spec.headroom"),
        ({"mode": "enforce"}, "spec.mode"),
        (
            {"plannedEvents": [{"name": "sale", "start": "2026-12-01T10:00:00Z",
                                "end": "2026-12-01T09:00:00Z", "factor": 2}]},
            "end must be after start",
        ),
        (
            {"plannedEvents": [{"name": "sale", "start": "2026-12-01T10:00:00Z",
                                "end": "2026-12-01T11:00:00Z", "factor": 0}]},
            "factor must be greater than zero",
        ),
        (
            {"plannedEvents": [{"name": "sale", "start": "2026-12-01T10:00:00Z",
                                "end": "2026-12-01T11:00:00Z", "factor": -1.5}]},
            "factor must be greater than zero",
        ),
        ({"targetRef": {"name": "Web_1"}}, "spec.targetRef.name"),
        ({"forecast": {"configMapRef": {"name": "fc/x", "key": "f.json"}}},
         "spec.forecast.configMapRef.name"),
        ({"forecast": {"url": "https://f.example/x", "maxAge": "0s"}},
         "maxAge must be greater than zero"),
        # The accuracy guard's thresholds (docs/policy.md, "Accuracy guard").
        ({"accuracyGuard": {"maxError": 0}}, "spec.accuracyGuard.maxError"),
        ({"accuracyGuard": {"maxError": -0.5}}, "spec.accuracyGuard.maxError"),
        ({"accuracyGuard": {"maxError": 11}}, "spec.accuracyGuard.maxError"),
        ({"accuracyGuard": {"maxExceedance": 0}}, "spec.accuracyGuard.maxExceedance"),
        ({"accuracyGuard": {"maxExceedance": 1.5}}, "spec.accuracyGuard.maxExceedance"),
        ({"accuracyGuard": {"window": "30s"}}, "accuracyGuard.window must be at least 1m"),
        ({"accuracyGuard": {"window": "0s"}}, "accuracyGuard.window must be at least 1m"),
        ({"accuracyGuard": {"window": "1 hour"}}, "spec.accuracyGuard.window"),
        ({"accuracyGuard": {"window": "169h"}}, "accuracyGuard durations must be at most 168h"),
        ({"accuracyGuard": {"recoverAfter": "-1m"}}, "spec.accuracyGuard.recoverAfter"),
        ({"accuracyGuard": {"recoverAfter": "169h"}},
         "accuracyGuard durations must be at most 168h"),
        ({"accuracyGuard": {"action": "Panic"}}, "spec.accuracyGuard.action"),
        ({"accuracyGuard": {"enabled": "yes"}}, "spec.accuracyGuard.enabled"),
    ],
)  # fmt: skip
def test_api_server_rejects_what_policy_py_rejects(
    crd_installed, api_client, namespace, spec, message
):
    obj = policy("bad", **spec)
    with pytest.raises(ApiException) as e:
        create(api_client, namespace, obj)
    assert e.value.status == 422
    assert message in json.loads(e.value.body)["message"]
    # policy.py refuses the same document (after the server's defaults would apply).
    with pytest.raises(ValueError):
        parse_policy(obj, source="bad")


def test_target_ref_is_immutable(crd_installed, api_client, namespace):
    """A floor raised on one HPA must not be stranded by pointing the policy elsewhere:
    the API server refuses the change (CEL transition rule ``self == oldSelf``)."""
    create(api_client, namespace, policy("fixed"))
    api = k8s.CustomObjectsApi(api_client)
    with pytest.raises(ApiException) as e:
        api.patch_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL, "fixed",
                                           {"spec": {"targetRef": {"name": "other"}}})  # fmt: skip
    assert e.value.status == 422
    assert "targetRef is immutable" in json.loads(e.value.body)["message"]
    api.patch_namespaced_custom_object(
        GROUP, VERSION, namespace, PLURAL, "fixed", {"spec": {"mode": "Enforce"}}
    )  # other fields still change
    got = api.get_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL, "fixed")
    assert got["spec"]["targetRef"]["name"] == "web" and got["spec"]["mode"] == "Enforce"


def test_short_name_and_printer_columns(crd_installed, control_plane, api_client, namespace):
    create(api_client, namespace, policy("cols", mode="Enforce"))
    out = eventually(
        lambda: control_plane.kubectl("get", "fsp", "-n", namespace).stdout,
        timeout=20,
        what="kubectl get fsp",
    )
    header = out.splitlines()[0].split()
    assert header == ["NAME", "TARGET", "MODE", "FLOOR", "BASELINE", "NEXT", "CHANGE", "READY",
                      "AGE"]  # fmt: skip
    assert "cols" in out and "Enforce" in out
    # The example policy in the repo is accepted by the real API server as shipped.
    example = yaml.safe_load((CRD.parents[1] / "docs" / "examples" / "policy.yaml").read_text())
    example["metadata"]["namespace"] = namespace
    create(api_client, namespace, example)


# ------------------------------------------- accuracyGuard: the server and policy.py agree

#: Values at and around the guard's own bounds; hypothesis mixes them with the
#: hardening test's arbitrary durations and numbers.
GUARD_DURATIONS = st.one_of(
    st.sampled_from(["1m", "60s", "59.999999999s", "59999ms", "60000ms", "1m0.000000001s",
                     "0s", "0.5s", "30s", "168h", "168h1ms", "10080m", "1h", "30m", ""]),
    DURATIONS,
)  # fmt: skip
GUARD_NUMBERS = st.one_of(
    st.sampled_from([0, 0.0, -0.0, 5e-324, 0.5, 1, 1.0000000000000002, 10, 10.000000000000002,
                     11, True, "0.5", None]),
    NUMBERS,
)  # fmt: skip
GUARD_FIELDS = {
    "enabled": st.sampled_from([True, False, None, "true", 1]),
    "maxError": GUARD_NUMBERS,
    "maxExceedance": GUARD_NUMBERS,
    "window": st.one_of(GUARD_DURATIONS, st.none()),
    "recoverAfter": st.one_of(GUARD_DURATIONS, st.none()),
    "action": st.sampled_from(["Baseline", "LiveCorrected", "baseline", "", "Panic", None]),
}


@st.composite
def guard_blocks(draw: Any) -> dict[str, Any]:
    keys = draw(st.sets(st.sampled_from(sorted(GUARD_FIELDS)), min_size=1, max_size=4))
    return {k: draw(GUARD_FIELDS[k]) for k in sorted(keys)}


def test_accuracy_guard_bounds_agree_with_policy_py(crd_installed, api_client, namespace):
    """Both directions on random ``accuracyGuard`` blocks: the API server's verdict (a
    server-side dry-run create: schema, maximums, CEL rules, defaults) equals
    ``parse_policy``'s, as e2e/test_operator_hardening.py does for the other bounds."""
    custom = k8s.CustomObjectsApi(api_client)
    tried: list[bool] = []

    @settings(max_examples=250, deadline=None, derandomize=True,
              suppress_health_check=list(HealthCheck))  # fmt: skip
    @given(guard_blocks())
    def check(block: dict[str, Any]) -> None:
        body = policy("probe", accuracyGuard=block)
        body["metadata"]["namespace"] = namespace
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
                                 f"({problem}): {json.dumps(block)}")  # fmt: skip

    check()
    print(f"accuracyGuard bounds: {len(tried)} blocks tried against the API server, "
          f"{sum(tried)} accepted, {len(tried) - sum(tried)} refused")  # fmt: skip
    assert sum(tried) > 20 and len(tried) - sum(tried) > 20  # both sides were exercised
