"""An accuracy guard threshold out of range, on the real control plane (issue #15).

Two ways it can come: through the shipped CRD, whose bounds make the API server
refuse it with the field's path, so the floor in force stays as it was; or through a
CRD that lacks those bounds (the chart's CRD is not upgraded by ``helm upgrade``, so
an operator can meet an older schema), where the operator refuses the policy itself:
Ready False ``PolicyInvalid`` naming the field, and the HPA's baseline back.

Floors from docs/policy.md's rule, as in e2e/test_operator.py: the forecast's peak of
6.5 at perReplica 1 needs ceil(6.5) = 7; the baseline is 2.
"""

from __future__ import annotations

import json
from typing import Any

import pytest
import yaml
from kubernetes.client.rest import ApiException

from e2e.operator_env import (
    BASELINE,
    CRD,
    GROUP,
    PLURAL,
    VERSION,
    Env,
    forecast_json,
    min_replicas,
    policy_body,
)

pytestmark = pytest.mark.e2e

GUARD = {"enabled": True, "window": "10m", "recoverAfter": "5m", "maxError": 0.5}


def _raised(env: Env) -> None:
    env.create_workload()
    env.put_forecast(forecast_json())
    env.start_operator()
    body = policy_body("p")
    body["spec"]["accuracyGuard"] = dict(GUARD)
    env.create_policy(body)
    env.wait(min_replicas(env, 7), "HPA minReplicas raised to 7")
    env.wait(lambda: (env.condition("p") or {}).get("reason") == "FloorApplied",
             "Ready reason FloorApplied")  # fmt: skip


def _patch_guard(env: Env, **fields: Any) -> None:
    env.custom.patch_namespaced_custom_object(GROUP, VERSION, env.namespace, PLURAL, "p",
                                              {"spec": {"accuracyGuard": fields}})  # fmt: skip


#: (field, value, what the API server's message says). The schema's own checks name
#: the full path; the CEL rules on durations name the block (``spec.accuracyGuard``)
#: and their own message. The 168h rule covers window and recoverAfter together, so
#: its message does not say which of the two was too long.
REFUSED = [
    ("maxError", 0, "spec.accuracyGuard.maxError"),
    ("maxError", 10.5, "spec.accuracyGuard.maxError"),
    ("maxExceedance", 0, "spec.accuracyGuard.maxExceedance"),
    ("maxExceedance", 2, "spec.accuracyGuard.maxExceedance"),
    ("window", "59s", "accuracyGuard.window must be at least 1m"),
    ("window", "169h", "accuracyGuard durations must be at most 168h"),
    ("recoverAfter", "169h", "accuracyGuard durations must be at most 168h"),
    ("recoverAfter", "-5m", "spec.accuracyGuard.recoverAfter"),
    ("action", "Off", "spec.accuracyGuard.action"),
]


def test_the_api_server_refuses_the_threshold_and_the_floor_stays(env: Env) -> None:
    _raised(env)
    before = env.policy("p")["spec"]["accuracyGuard"]
    for field, value, says in REFUSED:
        with pytest.raises(ApiException) as caught:
            _patch_guard(env, **{field: value})
        message = json.loads(caught.value.body)["message"]
        assert caught.value.status == 422, message
        assert says in message and "spec.accuracyGuard" in message, (field, value, message)
    assert env.policy("p")["spec"]["accuracyGuard"] == before  # nothing was stored
    assert env.hpa().spec.min_replicas == 7  # the refused edits changed nothing
    assert (env.condition("p") or {}).get("reason") == "FloorApplied"


def _without_guard_bounds() -> str:
    """The shipped CRD with the accuracy guard's bounds and CEL rules removed."""
    doc = yaml.safe_load(CRD.read_text())
    for v in doc["spec"]["versions"]:
        g = v["schema"]["openAPIV3Schema"]["properties"]["spec"]["properties"]["accuracyGuard"]
        g.pop("x-kubernetes-validations", None)
        for p in g["properties"].values():
            for k in ("minimum", "maximum", "exclusiveMinimum", "pattern"):
                p.pop(k, None)
    return yaml.safe_dump(doc)


def test_past_a_crd_without_the_bounds_the_operator_refuses_and_restores(
    env: Env, control_plane, tmp_path
) -> None:  # fmt: skip
    _raised(env)
    loose = tmp_path / "loose-crd.yaml"
    loose.write_text(_without_guard_bounds())
    control_plane.kubectl("apply", "-f", str(loose))
    try:
        env.wait(lambda: _accepts(env, maxError=0), "the loosened CRD to accept maxError 0")
        cond = env.wait(lambda: (c := env.condition("p")) and c["reason"] == "PolicyInvalid"
                        and c, "Ready reason PolicyInvalid")  # fmt: skip
        assert cond["status"] == "False"
        assert "spec.accuracyGuard.maxError" in cond["message"], cond["message"]
        assert "expected a finite number > 0 and <= 10, got 0" in cond["message"]
        env.wait(min_replicas(env, BASELINE), "the baseline restored")
        assert env.events("BaselineRestored")
        # Fixed, the policy raises the floor again.
        _patch_guard(env, maxError=0.5)
        env.wait(min_replicas(env, 7), "HPA minReplicas raised to 7 again")
        env.wait(lambda: (env.condition("p") or {}).get("reason") == "FloorApplied",
                 "Ready reason FloorApplied")  # fmt: skip
    finally:
        control_plane.kubectl("apply", "-f", str(CRD))


def _accepts(env: Env, **fields: Any) -> bool:
    """Patch while the API server may still serve the previous schema (it caches)."""
    try:
        _patch_guard(env, **fields)
    except ApiException as e:
        if e.status == 422:
            return False
        raise
    return True
