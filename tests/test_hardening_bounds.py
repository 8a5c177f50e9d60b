"""Issue #14, item 2: every number and duration in a policy is bounded, the same way in
the CRD and in policy.py, so no legal-looking value can overflow the operator.

The CEL side is compared by reading the rules out of the CRD; the behaviour of the
real API server is checked in e2e/test_operator_hardening.py (property test).
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest
import yaml

from floorcast import policy
from floorcast.durations import duration_ns, format_duration, parse_duration
from floorcast.errors import InputError

ROOT = Path(__file__).resolve().parents[1]
CRD = ROOT / "crds" / "forecastscalingpolicies.floorcast.dev.yaml"
CHART_CRD = ROOT / "charts" / "floorcast" / "crds" / CRD.name


def _spec_schema() -> dict[str, Any]:
    doc = yaml.safe_load(CRD.read_text())
    return doc["spec"]["versions"][0]["schema"]["openAPIV3Schema"]["properties"]["spec"]


def _doc(**spec: Any) -> dict[str, Any]:
    body = {"targetRef": {"name": "web"}, "forecast": {"url": "https://f.example/x"},
            "capacity": {"perReplica": 1}, **spec}  # fmt: skip
    return {"apiVersion": policy.API_VERSION, "kind": policy.KIND, "metadata": {"name": "a"},
            "spec": body}  # fmt: skip


def _event(factor: Any) -> list[dict[str, Any]]:
    return [{"name": "sale", "start": "2026-12-01T10:00:00Z", "end": "2026-12-01T11:00:00Z",
             "factor": factor}]  # fmt: skip


def test_chart_crd_is_byte_identical():
    assert CHART_CRD.read_bytes() == CRD.read_bytes()


def test_crd_maximums_are_policy_py_maximums():
    s = _spec_schema()["properties"]
    assert s["headroom"]["maximum"] == policy.MAX_HEADROOM
    assert s["capacity"]["properties"]["perReplica"]["maximum"] == policy.MAX_PER_REPLICA
    assert s["plannedEvents"]["items"]["properties"]["factor"]["maximum"] == policy.MAX_FACTOR
    for f in ("minReplicas", "maxReplicas"):
        assert s[f]["maximum"] == policy.MAX_REPLICAS == 2**31 - 1  # HPA replicas are int32
    assert s["plannedEvents"]["maxItems"] == policy.MAX_EVENTS


def test_every_duration_has_a_cel_maximum_equal_to_policy_py():
    spec = _spec_schema()
    rules = [r["rule"] for r in spec["x-kubernetes-validations"]]
    rules += [r["rule"] for r in spec["properties"]["forecast"]["x-kubernetes-validations"]]
    limit = format_duration(policy.MAX_DURATION)
    for field in ("holdTime", "maxAge"):
        assert f"duration(self.{field}) <= duration('{limit}')" in rules, field
    # leadTime also takes ``auto``, which CEL's duration() would refuse: guarded first.
    assert f"self.leadTime == 'auto' || duration(self.leadTime) <= duration('{limit}')" in rules
    auto = [r["rule"] for r in spec["properties"]["leadTimeAuto"]["x-kubernetes-validations"]]
    assert (f"duration(self.max) <= duration('{limit}') && "
            f"duration(self.margin) <= duration('{limit}')") in auto  # min ≤ max ≤ limit


@pytest.mark.parametrize("field", ["leadTime", "holdTime"])
def test_durations_at_and_beyond_the_bound(field):
    ok = policy.parse_policy(_doc(**{field: "168h"}), source="t")
    attr = "lead_time" if field == "leadTime" else "hold_time"
    assert getattr(ok.spec, attr) == policy.MAX_DURATION
    # The issue's values: 99999999999999h raised OverflowError, 9999999999h broke planning.
    for bad in ("168h1ms", "99999999999999h", "9999999999h", "9" * 60 + "h"):
        with pytest.raises(policy.PolicyError, match=rf"spec\.{field}: .*at most 168h"):
            policy.parse_policy(_doc(**{field: bad}), source="t")


def test_max_age_bound():
    doc = _doc(forecast={"url": "https://f.example/x", "maxAge": "168h0.5s"})
    with pytest.raises(policy.PolicyError, match=r"spec\.forecast\.maxAge: .*at most 168h"):
        policy.parse_policy(doc, source="t")


def test_duration_longer_than_max_length_is_refused_like_the_crd():
    text = "1s" * 33  # 66 characters, a valid pattern, over maxLength 64
    assert _spec_schema()["properties"]["holdTime"]["maxLength"] == policy.MAX_DURATION_LENGTH
    with pytest.raises(policy.PolicyError, match=r"spec\.holdTime: is 66 characters"):
        policy.parse_policy(_doc(holdTime=text), source="t")


@pytest.mark.parametrize(("spec", "path"), [
    ({"headroom": 10.5}, "spec.headroom"),
    ({"headroom": 10**400}, "spec.headroom"),
    ({"capacity": {"perReplica": 1e13}}, "spec.capacity.perReplica"),
    ({"plannedEvents": _event(1e12)}, "spec.plannedEvents[0].factor"),
    ({"plannedEvents": _event(10**400)}, "spec.plannedEvents[0].factor"),
    ({"minReplicas": 2**31}, "spec.minReplicas"),
    ({"maxReplicas": 10**400}, "spec.maxReplicas"),
])  # fmt: skip
def test_numbers_beyond_the_bound_are_policy_errors(spec, path):
    with pytest.raises(policy.PolicyError) as caught:
        policy.parse_policy(_doc(**spec), source="t")
    assert caught.value.path == path
    assert len(str(caught.value)) < 200  # a 400-digit number is not echoed in full


def test_numbers_at_the_bound_are_accepted():
    p = policy.parse_policy(_doc(headroom=10, plannedEvents=_event(1000),
                                 capacity={"perReplica": 1e12}, maxReplicas=2**31 - 1),
                            source="t")  # fmt: skip
    assert (p.spec.headroom, p.spec.planned_events[0].factor) == (10.0, 1000.0)
    assert p.spec.max_replicas == 2**31 - 1


def test_more_events_than_max_items_is_refused():
    evs = [{**_event(2)[0], "name": f"e{i}"} for i in range(policy.MAX_EVENTS + 1)]
    with pytest.raises(policy.PolicyError, match=r"spec\.plannedEvents: has 101 events"):
        policy.parse_policy(_doc(plannedEvents=evs), source="t")


# Values from Go's time package: the ParseDuration doc example "1h15m30.918273645s" and
# the int64 limit 2562047h47m16.854775807s (from Go's time tests, cited from memory).
@pytest.mark.parametrize(("text", "ns"), [
    ("1h15m30.918273645s", 4530918273645),
    ("2562047h47m16.854775807s", 2**63 - 1),
    ("2562047h47m16.854775808s", None),
    ("0.0001ms", 100),
    ("1.5h", 5400 * 10**9),
    ("99999999999999h", None),
    ("1.0000000000000000000000001s", 10**9),  # digits past int64 precision are dropped
])  # fmt: skip
def test_duration_ns_is_gos_parse_duration(text, ns):
    assert duration_ns(text) == ns


def test_parse_duration_never_overflows():
    for text in ("99999999999h", "9" * 30 + "w", "1" + "0" * 20 + "ms"):
        with pytest.raises(InputError, match="too long"):
            parse_duration(text, field="--x")
    assert parse_duration("2d") == parse_duration("48h")


def test_pattern_still_the_policy_pattern():
    # The bound rules are extra: the pattern keeps refusing what it refused.
    assert re.fullmatch(_spec_schema()["properties"]["holdTime"]["pattern"], "168h")
