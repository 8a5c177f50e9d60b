"""The CRD schema and policy.py must agree on every field, default and pattern.

The API server validates what `kubectl apply` sends; policy.py validates what the CLI
reads and what the operator gets back. If they disagreed, a policy could preview
cleanly and then be rejected (or the reverse), so this test holds them together.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest
import yaml

from floorcast import policy
from floorcast.durations import DURATION_PATTERN, LEAD_TIME_PATTERN

CRD = Path(__file__).resolve().parents[1] / "crds" / "forecastscalingpolicies.floorcast.dev.yaml"


@pytest.fixture(scope="module")
def schema() -> dict[str, Any]:
    doc = yaml.safe_load(CRD.read_text())
    assert doc["spec"]["group"] == "floorcast.dev"
    assert doc["spec"]["names"]["kind"] == policy.KIND
    assert doc["spec"]["names"]["shortNames"] == ["fsp"]
    (version,) = doc["spec"]["versions"]
    assert f"{doc['spec']['group']}/{version['name']}" == policy.API_VERSION
    assert version["subresources"] == {"status": {}}
    return version["schema"]["openAPIV3Schema"]


def defaults_of(node: dict[str, Any]) -> dict[str, Any]:
    """Collect schema defaults into the nested dict shape spec_defaults() uses."""
    out: dict[str, Any] = {}
    for name, prop in node.get("properties", {}).items():
        if "default" in prop:
            out[name] = prop["default"]
        elif prop.get("type") == "object":
            sub = defaults_of(prop)
            if sub:
                out[name] = sub
    return out


def test_every_spec_field_is_in_both(schema):
    spec = schema["properties"]["spec"]
    assert set(spec["properties"]) == set(policy._SPEC_FIELDS)
    assert set(spec["required"]) == {"targetRef", "forecast", "capacity"}


def test_every_default_agrees(schema):
    assert defaults_of(schema["properties"]["spec"]) == policy.spec_defaults()


def test_duration_patterns_are_the_policy_pattern(schema):
    spec = schema["properties"]["spec"]["properties"]
    for prop in (spec["holdTime"], spec["forecast"]["properties"]["maxAge"]):
        assert prop["pattern"] == DURATION_PATTERN
    assert spec["leadTime"]["pattern"] == LEAD_TIME_PATTERN
    assert re.fullmatch(LEAD_TIME_PATTERN, "auto") and re.fullmatch(LEAD_TIME_PATTERN, "90s")
    for bad in ("Auto", "auto5m", "5mauto"):
        assert not re.fullmatch(LEAD_TIME_PATTERN, bad)
    # And what the pattern accepts, policy.py parses (and the reverse for samples).
    for text in ("5m", "1h30m", "90s", "250ms", "0s"):
        assert re.fullmatch(DURATION_PATTERN, text)
    for text in ("1d", "5", "-5m", "5 m"):
        assert not re.fullmatch(DURATION_PATTERN, text)


def test_mode_enum_matches(schema):
    mode = schema["properties"]["spec"]["properties"]["mode"]
    assert tuple(mode["enum"]) == policy.MODES


def test_status_has_the_design_fields(schema):
    status = schema["properties"]["status"]["properties"]
    assert set(status) == {
        "floor", "baseline", "proposedFloor", "nextChange", "forecastGenerated",
        "lastAppliedTime", "observedGeneration", "conditions", "liveCorrection",
        "accuracy", "addedReplicaHours", "leadTime", "explanation",
    }  # fmt: skip
    # The API server prunes what the schema does not name: every key the operator
    # writes must be here, or it is silently dropped.
    from floorcast.controller.state import STATUS_KEYS

    assert set(STATUS_KEYS) == set(status)
    assert set(status["leadTime"]["properties"]) == {"value", "source", "podStartup", "samples"}
    assert set(status["liveCorrection"]["properties"]) == {"factor", "reason", "message"}
    cond = status["conditions"]["items"]
    # Kubernetes API conventions' condition shape (metav1.Condition).
    assert set(cond["properties"]) == {
        "type", "status", "reason", "message", "lastTransitionTime", "observedGeneration",
    }  # fmt: skip


def test_minimal_policy_parses_with_the_crd_defaults(schema):
    p = policy.load_policy_text(
        "apiVersion: floorcast.dev/v1alpha1\nkind: ForecastScalingPolicy\n"
        "metadata: {name: a}\nspec:\n  targetRef: {name: web}\n"
        "  forecast: {url: 'https://forecasts.example/web.json'}\n  capacity: {fromHPA: true}\n",
        source="t",
    )
    d = defaults_of(schema["properties"]["spec"])
    assert p.spec.mode == d["mode"]
    assert p.spec.headroom == d["headroom"]
    assert p.spec.use_upper_bound is d["useUpperBound"]
    assert policy.format_duration(p.spec.lead_time) == d["leadTime"]
    assert policy.format_duration(p.spec.hold_time) == d["holdTime"]
    assert policy.format_duration(p.spec.forecast.max_age) == d["forecast"]["maxAge"]


def test_policy_refuses_day_units_like_the_crd():
    with pytest.raises(policy.PolicyError, match=r"spec\.holdTime.*24h, not 1d"):
        policy.load_policy_text(
            "apiVersion: floorcast.dev/v1alpha1\nkind: ForecastScalingPolicy\n"
            "metadata: {name: a}\nspec:\n  targetRef: {name: web}\n"
            "  forecast: {url: 'https://f.example/x'}\n  capacity: {fromHPA: true}\n"
            "  holdTime: 1d\n",
            source="t",
        )


def _collect(node: dict[str, Any], key: str, path: str = "") -> dict[str, Any]:
    """Every ``key`` (pattern, maxLength, ...) under ``node``, by dotted path (arrays
    as ``name[]``)."""
    out = {path: node[key]} if key in node else {}
    for name, prop in (node.get("properties") or {}).items():
        out.update(_collect(prop, key, f"{path}.{name}" if path else name))
    if "items" in node:
        out.update(_collect(node["items"], key, f"{path}[]"))
    return out


def test_every_string_pattern_is_the_one_policy_py_applies(schema):
    got = _collect(schema["properties"]["spec"], "pattern")
    names = {"targetRef.name", "forecast.configMapRef.name"}
    assert {p for p, v in got.items() if v == policy._DNS_SUBDOMAIN.pattern} == names
    assert got["forecast.configMapRef.key"] == policy._CONFIGMAP_KEY.pattern
    durations = {p for p, v in got.items() if v == DURATION_PATTERN}
    assert durations == {"holdTime", "forecast.maxAge", "liveCorrection.halfLife",
                         "leadTimeAuto.margin", "leadTimeAuto.min", "leadTimeAuto.max",
                         "accuracyGuard.window", "accuracyGuard.recoverAfter"}
    assert got["leadTime"] == LEAD_TIME_PATTERN
    assert set(got) == names | durations | {"forecast.configMapRef.key", "forecast.url",
                                            "leadTime"}
    # What the name pattern refuses, policy.py refuses too, with the field's path.
    for bad in ("Web_1", "web.", "-web", "fc/x"):
        assert not re.fullmatch(got["targetRef.name"], bad)
        with pytest.raises(policy.PolicyError, match=r"spec\.targetRef\.name"):
            policy.load_policy_text(
                "apiVersion: floorcast.dev/v1alpha1\nkind: ForecastScalingPolicy\n"
                f"metadata: {{name: a}}\nspec:\n  targetRef: {{name: '{bad}'}}\n"
                "  forecast: {url: 'https://f.example/x'}\n  capacity: {fromHPA: true}\n",
                source="t",
            )


def _doc(**spec: Any) -> dict[str, Any]:
    body = {"targetRef": {"name": "web"}, "forecast": {"url": "https://f.example/x"},
            "capacity": {"fromHPA": True}, **spec}  # fmt: skip
    return {"apiVersion": policy.API_VERSION, "kind": policy.KIND, "metadata": {"name": "a"},
            "spec": body}  # fmt: skip


def test_string_lengths_are_the_crd_max_lengths(schema):
    """At the CRD's maxLength policy.py accepts; one character more it refuses, naming the
    field. Durations are left out: a 64-character duration is refused either way."""
    limits = _collect(schema["properties"]["spec"], "maxLength")
    event = {"name": "sale", "start": "2026-12-01T10:00:00Z", "end": "2026-12-01T11:00:00Z",
             "factor": 2}  # fmt: skip
    build = {
        "targetRef.name": lambda n: _doc(targetRef={"name": "a" * n}),
        "forecast.configMapRef.name": lambda n: _doc(
            forecast={"configMapRef": {"name": "a" * n, "key": "k"}}),
        "forecast.configMapRef.key": lambda n: _doc(
            forecast={"configMapRef": {"name": "fc", "key": "k" * n}}),
        "forecast.url": lambda n: _doc(forecast={"url": "https://f.example/" + "x" * (n - 18)}),
        "plannedEvents[].name": lambda n: _doc(plannedEvents=[{**event, "name": "e" * n}]),
        "observedLoad.prometheusQuery": lambda n: _doc(
            observedLoad={"prometheusQuery": "sum(up)" + " " * (n - 7)}),
    }  # fmt: skip
    checked = {
        p
        for p in limits
        if not {
            "leadTime",
            "holdTime",
            "forecast.maxAge",
            "liveCorrection.halfLife",
            "leadTimeAuto.margin",
            "leadTimeAuto.min",
            "leadTimeAuto.max",
            "accuracyGuard.window",
            "accuracyGuard.recoverAfter",
            "plannedEvents[].start",
            "plannedEvents[].end",
        }
        & {p}
    }
    assert checked == set(build)
    for path, make in build.items():
        n = limits[path]
        policy.parse_policy(make(n), source="t")  # at the limit: fine
        field = "spec." + path.replace("[]", "[0]")
        with pytest.raises(policy.PolicyError, match=re.escape(field)):
            policy.parse_policy(make(n + 1), source="t")


def test_lead_time_auto_parses_with_bounds_and_falls_back_within_them():
    p = policy.parse_policy(_doc(leadTime="auto"), source="t")
    assert p.spec.lead_time_auto == policy.LeadTimeAuto()
    assert p.spec.lead_time == policy.DEFAULT_LEAD_TIME  # 5m is inside [30s, 15m]
    p = policy.parse_policy(_doc(leadTime="auto", leadTimeAuto={"min": "10m", "max": "20m"}),
                            source="t")  # fmt: skip
    assert policy.format_duration(p.spec.lead_time) == "10m"  # the default, raised to min
    assert policy.parse_policy(_doc(leadTime="5m"), source="t").spec.lead_time_auto is None
    with pytest.raises(policy.PolicyError, match=r"spec\.leadTimeAuto: applies only"):
        policy.parse_policy(_doc(leadTime="5m", leadTimeAuto={"margin": "1m"}), source="t")
    with pytest.raises(policy.PolicyError, match=r"spec\.leadTimeAuto\.max: .*expected max >= min"):
        policy.parse_policy(_doc(leadTime="auto", leadTimeAuto={"min": "2m", "max": "1m"}),
                            source="t")  # fmt: skip
    with pytest.raises(policy.PolicyError, match=r"spec\.leadTimeAuto\.min"):
        policy.parse_policy(_doc(leadTime="auto", leadTimeAuto={"min": "0s"}), source="t")
    with pytest.raises(policy.PolicyError, match=r"spec\.leadTime"):
        policy.parse_policy(_doc(leadTime="Auto"), source="t")
