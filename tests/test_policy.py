"""Tests for the ForecastScalingPolicy model: defaults, every field, and every rejection."""

from __future__ import annotations

import copy
import dataclasses
from datetime import timedelta
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
import yaml

from floorcast.errors import InputError
from floorcast.policy import (
    API_VERSION,
    KIND,
    Capacity,
    ConfigMapRef,
    ForecastSource,
    PlannedEvent,
    Policy,
    PolicyError,
    PolicySpec,
    load_policy_file,
    load_policy_text,
    parse_policy,
    parse_spec,
    spec_defaults,
)

EXAMPLE = Path(__file__).resolve().parents[1] / "docs" / "examples" / "policy.yaml"
SOURCE = "policies/web.yaml"

_MINIMAL: dict[str, Any] = {
    "apiVersion": "floorcast.dev/v1alpha1",
    "kind": "ForecastScalingPolicy",
    "metadata": {"name": "web"},
    "spec": {
        "targetRef": {"name": "web"},
        "forecast": {"configMapRef": {"name": "web-forecast", "key": "forecast.json"}},
        "capacity": {"perReplica": 0.5},
    },
}

_EVENTS = [
    {"name": "launch", "start": "2025-03-01T08:00:00Z", "end": "2025-03-01T12:00:00Z", "factor": 2},
    {"name": "sale", "start": "2025-03-02T08:00:00Z", "end": "2025-03-02T20:00:00Z", "factor": 1.5},
]


def minimal(**spec: Any) -> dict[str, Any]:
    """A fresh minimal policy; keyword arguments replace (or, as None, delete) spec fields."""
    doc = copy.deepcopy(_MINIMAL)
    for key, value in spec.items():
        if value is None:
            doc["spec"].pop(key, None)
        else:
            doc["spec"][key] = value
    return doc


def with_events(**changes: Any) -> dict[str, Any]:
    """A policy with two events, the second (index 1) changed, so paths must carry the index."""
    events = copy.deepcopy(_EVENTS)
    events[1].update(changes)
    return minimal(plannedEvents=events)


def rejects(doc: Any, path: str, *fragments: str) -> PolicyError:
    with pytest.raises(PolicyError) as caught:
        parse_policy(doc, source=SOURCE)
    err = caught.value
    message = str(err)
    assert message.startswith(f"{SOURCE}: "), message
    assert f"{path}: " in message, message
    assert err.path == path
    for fragment in fragments:
        assert fragment in message, message
    return err


# --- defaults and successful parses -------------------------------------------------------


def test_minimal_policy_gets_every_design_default() -> None:
    policy = parse_policy(minimal(), source=SOURCE)
    spec = policy.spec
    assert policy.name == "web"
    assert policy.namespace == "default"
    assert policy.generation is None and policy.uid is None
    assert spec.target_name == "web"
    assert spec.forecast == ForecastSource(
        config_map_ref=ConfigMapRef(name="web-forecast", key="forecast.json"),
        url=None,
        max_age=timedelta(hours=6),
    )
    assert spec.capacity == Capacity(per_replica=0.5, from_hpa=False)
    assert spec.lead_time == timedelta(minutes=5)
    assert spec.hold_time == timedelta(0)  # docs/backtest.md, holdTime: no double holding
    assert spec.headroom == pytest.approx(0.1)
    assert spec.use_upper_bound is True
    assert spec.min_replicas is None
    assert spec.max_replicas is None
    assert spec.mode == "DryRun"
    assert spec.planned_events == ()


FULL_YAML = """\
apiVersion: floorcast.dev/v1alpha1
kind: ForecastScalingPolicy
metadata:
  name: checkout
  namespace: payments
  uid: 0b5c3a52-1111-4c2e-9d8e-6a1f00000001
  generation: 7
  labels: {team: payments}
spec:
  targetRef:
    apiVersion: autoscaling/v2
    kind: HorizontalPodAutoscaler
    name: checkout-api
  forecast:
    url: https://forecasts.internal.example:8443/checkout.json
    maxAge: 1h30m
  capacity:
    fromHPA: true
  leadTime: 90s
  holdTime: 0s
  headroom: 0
  useUpperBound: false
  minReplicas: 3
  maxReplicas: 30
  mode: Enforce
  plannedEvents:
    - name: launch
      start: 2025-03-01T09:00:00+01:00
      end: "2025-03-01T13:30:00.5+01:00"
      factor: 2
    - name: newsletter
      start: 2025-03-04T18:00:00Z
      end: 2025-03-04T20:00:00Z
      factor: 0.5
status:
  floor: 4
  observedGeneration: 6
"""


def test_full_policy_parses_every_field() -> None:
    policy = load_policy_text(FULL_YAML, source=SOURCE)
    assert policy == Policy(
        name="checkout",
        namespace="payments",
        generation=7,
        uid="0b5c3a52-1111-4c2e-9d8e-6a1f00000001",
        spec=PolicySpec(
            target_name="checkout-api",
            forecast=ForecastSource(
                config_map_ref=None,
                url="https://forecasts.internal.example:8443/checkout.json",
                max_age=timedelta(hours=1, minutes=30),
            ),
            capacity=Capacity(per_replica=None, from_hpa=True),
            lead_time=timedelta(seconds=90),
            hold_time=timedelta(0),
            headroom=0.0,
            use_upper_bound=False,
            min_replicas=3,
            max_replicas=30,
            mode="Enforce",
            planned_events=(
                PlannedEvent(
                    name="launch",
                    start=pd.Timestamp("2025-03-01T08:00:00Z"),
                    end=pd.Timestamp("2025-03-01T12:30:00.5Z"),
                    factor=2.0,
                ),
                PlannedEvent(
                    name="newsletter",
                    start=pd.Timestamp("2025-03-04T18:00:00Z"),
                    end=pd.Timestamp("2025-03-04T20:00:00Z"),
                    factor=0.5,
                ),
            ),
        ),
    )


def test_event_times_are_utc_timestamps() -> None:
    event = load_policy_text(FULL_YAML, source=SOURCE).spec.planned_events[0]
    assert isinstance(event.start, pd.Timestamp)
    assert str(event.start.tz) == "UTC"
    assert event.start.hour == 8  # 09:00+01:00


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("1h30m", timedelta(hours=1, minutes=30)),
        ("90s", timedelta(seconds=90)),
        ("2h", timedelta(hours=2)),
        ("1.5h", timedelta(minutes=90)),
        ("250ms", timedelta(milliseconds=250)),
    ],
)
def test_go_style_durations(text: str, expected: timedelta) -> None:
    spec = parse_spec(minimal(leadTime=text, holdTime=text)["spec"], source=SOURCE)
    assert spec.lead_time == expected
    assert spec.hold_time == expected


def test_explicit_null_optional_fields_take_defaults() -> None:
    doc = minimal()
    doc["spec"].update({"leadTime": None, "mode": None, "minReplicas": None, "plannedEvents": None})
    spec = parse_policy(doc).spec
    assert spec.lead_time == timedelta(minutes=5)
    assert spec.mode == "DryRun"
    assert spec.min_replicas is None
    assert spec.planned_events == ()


def test_api_server_object_with_status_and_standard_metadata_parses() -> None:
    doc = minimal()
    doc["metadata"].update(
        {
            "namespace": "shop",
            "uid": "c0ffee00-0000-4000-8000-000000000001",
            "generation": 3,
            "resourceVersion": "12345",
            "creationTimestamp": "2025-01-01T00:00:00Z",
            "annotations": {"kubectl.kubernetes.io/last-applied-configuration": "{}"},
            "finalizers": ["kopf.zalando.org/KopfFinalizerMarker"],
            "managedFields": [{"manager": "kubectl"}],
        }
    )
    doc["status"] = {"floor": 4, "conditions": []}
    policy = parse_policy(doc)
    assert (policy.namespace, policy.generation, policy.uid) == (
        "shop",
        3,
        "c0ffee00-0000-4000-8000-000000000001",
    )


def test_model_is_frozen() -> None:
    policy = parse_policy(minimal())
    with pytest.raises(dataclasses.FrozenInstanceError):
        policy.spec.headroom = 0.5  # type: ignore[misc]


def test_spec_defaults_match_design() -> None:
    assert spec_defaults() == {
        "forecast": {"maxAge": "6h"},
        "leadTime": "5m",
        "holdTime": "0s",
        "headroom": 0.1,
        "useUpperBound": True,
        "mode": "DryRun",
        "liveCorrection": {"enabled": False, "halfLife": "30m", "min": 0.5, "max": 2.0},
        "leadTimeAuto": {"margin": "30s", "min": "30s", "max": "15m"},
        "accuracyGuard": {"enabled": False, "maxError": 0.5, "maxExceedance": 0.5,
                          "window": "1h", "recoverAfter": "30m", "action": "Baseline"},
    }


def test_spec_defaults_written_out_parse_like_omitted_ones() -> None:
    # leadTimeAuto applies only with leadTime: auto, so written out it is left out.
    doc = minimal(**{k: v for k, v in spec_defaults().items()
                     if k not in ("forecast", "leadTimeAuto")})  # fmt: skip
    doc["spec"]["forecast"].update(spec_defaults()["forecast"])
    assert parse_policy(doc) == parse_policy(minimal())


def test_spec_defaults_returns_a_fresh_dict() -> None:
    spec_defaults()["forecast"]["maxAge"] = "1m"
    assert spec_defaults()["forecast"]["maxAge"] == "6h"


def test_example_policy_parses() -> None:
    policy = load_policy_file(EXAMPLE)
    spec = policy.spec
    assert (policy.name, policy.namespace, spec.target_name) == ("storefront", "shop", "storefront")
    assert spec.forecast.config_map_ref == ConfigMapRef("storefront-forecast", "forecast.json")
    assert spec.capacity == Capacity(per_replica=0.8, from_hpa=False)
    assert (spec.lead_time, spec.hold_time) == (timedelta(minutes=10), timedelta(minutes=30))
    assert spec.headroom == pytest.approx(0.15)
    assert spec.mode == "DryRun"
    assert [(e.name, e.factor) for e in spec.planned_events] == [("winter-sale", 1.8)]


def test_load_policy_file_reads_a_file(tmp_path: Path) -> None:
    path = tmp_path / "p.yaml"
    path.write_text(yaml.safe_dump(minimal(mode="Enforce")), encoding="utf-8")
    assert load_policy_file(path).spec.mode == "Enforce"
    assert load_policy_file(str(path)).spec.mode == "Enforce"


def test_missing_file_names_it(tmp_path: Path) -> None:
    path = tmp_path / "nope.yaml"
    with pytest.raises(PolicyError, match="not found") as caught:
        load_policy_file(path)
    assert str(caught.value).startswith(f"{path}: ")


def test_errors_in_a_file_name_the_file(tmp_path: Path) -> None:
    path = tmp_path / "bad.yaml"
    path.write_text(yaml.safe_dump(minimal(headroom=-1)), encoding="utf-8")
    with pytest.raises(PolicyError) as caught:
        load_policy_file(path)
    assert str(caught.value).startswith(f"{path}: spec.headroom: ")


# --- multi-document YAML ----------------------------------------------------------------

HPA_YAML = """\
apiVersion: autoscaling/v2
kind: HorizontalPodAutoscaler
metadata: {name: web}
spec: {minReplicas: 2, maxReplicas: 10}
"""


def test_multi_document_yaml_picks_the_policy() -> None:
    text = "---\n" + HPA_YAML + "---\n" + yaml.safe_dump(minimal(mode="Enforce")) + "---\n"
    policy = load_policy_text(text, source=SOURCE)
    assert policy.spec.mode == "Enforce"
    assert policy.name == "web"


def test_multi_document_yaml_with_two_policies_is_rejected() -> None:
    one = yaml.safe_dump(minimal())
    with pytest.raises(PolicyError, match=r"exactly one ForecastScalingPolicy.*found 2"):
        load_policy_text(one + "---\n" + one, source=SOURCE)


@pytest.mark.parametrize("text", [HPA_YAML, "", "---\n---\n"])
def test_yaml_without_a_policy_is_rejected(text: str) -> None:
    with pytest.raises(PolicyError, match="found 0") as caught:
        load_policy_text(text, source=SOURCE)
    assert str(caught.value).startswith(f"{SOURCE}: ")


# --- rejections -------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("where", "path", "allowed"),
    [
        ((), "replicas", "apiVersion, kind, metadata, spec, status"),
        (("metadata",), "metadata.replicas", "annotations"),
        (("spec",), "spec.replicas", "capacity, forecast, headroom"),
        (("spec", "targetRef"), "spec.targetRef.replicas", "apiVersion, kind, name"),
        (("spec", "forecast"), "spec.forecast.replicas", "configMapRef, maxAge, url"),
        (("spec", "forecast", "configMapRef"), "spec.forecast.configMapRef.replicas", "key, name"),
        (("spec", "capacity"), "spec.capacity.replicas", "fromHPA, perReplica"),
        (("spec", "plannedEvents", 1), "spec.plannedEvents[1].replicas", "end, factor, name"),
    ],
)
def test_unknown_fields_are_rejected_at_every_level(
    where: tuple[Any, ...], path: str, allowed: str
) -> None:
    doc = with_events()
    target: Any = doc
    for key in where:
        target = target[key]
    target["replicas"] = 3
    rejects(doc, path, "unknown field", allowed)


def test_unknown_field_suggests_the_near_miss() -> None:
    rejects(minimal(leadtime="5m"), "spec.leadtime", "did you mean 'leadTime'?")


@pytest.mark.parametrize(
    ("spec", "path", "expected"),
    [
        ({"headroom": "lots"}, "spec.headroom", "expected a number"),
        ({"headroom": True}, "spec.headroom", "expected a number"),
        ({"useUpperBound": "yes please"}, "spec.useUpperBound", "expected true or false"),
        ({"minReplicas": True}, "spec.minReplicas", "expected an integer"),
        ({"maxReplicas": 2.5}, "spec.maxReplicas", "expected an integer"),
        ({"minReplicas": 0}, "spec.minReplicas", ">= 1"),
        ({"mode": 1}, "spec.mode", "expected one of DryRun, Enforce"),
        ({"capacity": {"perReplica": "0.8"}}, "spec.capacity.perReplica", "expected a number"),
        ({"capacity": {"fromHPA": "true"}}, "spec.capacity.fromHPA", "expected true or false"),
        ({"targetRef": ["web"]}, "spec.targetRef", "expected a mapping"),
        ({"targetRef": {"name": 5}}, "spec.targetRef.name", "expected a non-empty string"),
        ({"forecast": "web-forecast"}, "spec.forecast", "expected a mapping"),
        ({"plannedEvents": {"name": "x"}}, "spec.plannedEvents", "expected a list"),
        ({"plannedEvents": ["x"]}, "spec.plannedEvents[0]", "expected a mapping"),
    ],
)
def test_wrong_types_are_rejected(spec: dict[str, Any], path: str, expected: str) -> None:
    rejects(minimal(**spec), path, expected)


def test_spec_and_metadata_must_be_mappings() -> None:
    rejects({**minimal(), "spec": "nothing"}, "spec", "expected a mapping")
    rejects({**minimal(), "metadata": ["web"]}, "metadata", "expected a mapping")


@pytest.mark.parametrize(
    ("field", "text"),
    [("leadTime", "0s"), ("leadTime", "-5m"), ("holdTime", "-1m")],
)
def test_zero_or_negative_durations_are_rejected(field: str, text: str) -> None:
    rejects(minimal(**{field: text}), f"spec.{field}", repr(text))


def test_zero_max_age_is_rejected() -> None:
    doc = minimal()
    doc["spec"]["forecast"]["maxAge"] = "0s"
    rejects(doc, "spec.forecast.maxAge", "greater than zero")


def test_zero_hold_time_is_allowed() -> None:
    assert parse_policy(minimal(holdTime="0s")).spec.hold_time == timedelta(0)


@pytest.mark.parametrize("value", ["5 minutes", "1h30", "PT5M", "5M", "", 300])
def test_unparseable_durations_are_rejected(value: Any) -> None:
    rejects(minimal(leadTime=value), "spec.leadTime", "'5m'")


def test_max_below_min_replicas_is_rejected() -> None:
    rejects(minimal(minReplicas=5, maxReplicas=4), "spec.maxReplicas", "minReplicas (5)")
    spec = parse_policy(minimal(minReplicas=4, maxReplicas=4)).spec
    assert (spec.min_replicas, spec.max_replicas) == (4, 4)


@pytest.mark.parametrize("value", [-0.1, -1, float("inf"), float("nan")])
def test_negative_or_non_finite_headroom_is_rejected(value: float) -> None:
    rejects(minimal(headroom=value), "spec.headroom", ">= 0")


@pytest.mark.parametrize("factor", [0, -1.5])
def test_event_factor_must_be_positive(factor: float) -> None:
    rejects(with_events(factor=factor), "spec.plannedEvents[1].factor", "> 0")


@pytest.mark.parametrize(
    "end",
    [
        "2025-03-02T08:00:00Z",  # equal to start
        "2025-03-02T07:59:59Z",  # before start
        "2025-03-02T09:00:00+01:00",  # the same instant, written with an offset
    ],
)
def test_event_end_must_be_after_start(end: str) -> None:
    rejects(with_events(end=end), "spec.plannedEvents[1].end", "expected end > start")


@pytest.mark.parametrize(
    ("value", "problem"),
    [
        ("2025-03-02T08:00:00", "RFC 3339"),  # no offset
        ("2025-03-02", "RFC 3339"),
        ("next tuesday", "RFC 3339"),
        (1740902400, "RFC 3339"),
        ("2025-02-30T08:00:00Z", "not a real date"),
    ],
)
def test_event_times_must_be_rfc3339_with_offset(value: Any, problem: str) -> None:
    rejects(with_events(start=value), "spec.plannedEvents[1].start", problem)


def test_event_fields_are_required() -> None:
    events = copy.deepcopy(_EVENTS)
    del events[1]["end"]
    rejects(minimal(plannedEvents=events), "spec.plannedEvents[1].end", "required")


def test_event_names_must_be_unique() -> None:
    rejects(with_events(name="launch"), "spec.plannedEvents[1].name", "spec.plannedEvents[0]")


@pytest.mark.parametrize(
    ("capacity", "which"),
    [
        ({"perReplica": 0.8, "fromHPA": True}, "both"),
        ({}, "neither"),
        ({"fromHPA": False}, "neither"),
    ],
)
def test_capacity_needs_exactly_one_source(capacity: dict[str, Any], which: str) -> None:
    rejects(minimal(capacity=capacity), "spec.capacity", f"not {which}")


def test_per_replica_with_from_hpa_false_is_fine() -> None:
    capacity = parse_policy(minimal(capacity={"perReplica": 2, "fromHPA": False})).spec.capacity
    assert capacity == Capacity(per_replica=2.0, from_hpa=False)


@pytest.mark.parametrize("value", [0, -0.5])
def test_per_replica_must_be_positive(value: float) -> None:
    rejects(minimal(capacity={"perReplica": value}), "spec.capacity.perReplica", "> 0")


@pytest.mark.parametrize(
    ("forecast", "which"),
    [
        ({"configMapRef": {"name": "f", "key": "k"}, "url": "https://f.example/x"}, "both"),
        ({}, "neither"),
        ({"maxAge": "1h"}, "neither"),
    ],
)
def test_forecast_needs_exactly_one_source(forecast: dict[str, Any], which: str) -> None:
    rejects(minimal(forecast=forecast), "spec.forecast", f"not {which}")


@pytest.mark.parametrize(
    "url", ["ftp://f.example/x", "https://", "file:///tmp/x.json", "f.example/x", "http://[::1"]
)
def test_forecast_url_must_be_http_with_a_host(url: str) -> None:
    rejects(minimal(forecast={"url": url}), "spec.forecast.url", "http(s)://")


def test_config_map_ref_needs_name_and_key() -> None:
    forecast = {"configMapRef": {"name": "web-forecast"}}
    rejects(minimal(forecast=forecast), "spec.forecast.configMapRef.key", "required")
    forecast = {"configMapRef": {"name": "Web_Forecast", "key": "f.json"}}
    rejects(minimal(forecast=forecast), "spec.forecast.configMapRef.name", "not valid")


def test_mode_is_case_sensitive() -> None:
    rejects(minimal(mode="enforce"), "spec.mode", "did you mean 'Enforce'?")


def test_target_ref_extras() -> None:
    ref = {"name": "web", "kind": "HorizontalPodAutoscaler", "apiVersion": "autoscaling/v2"}
    assert parse_policy(minimal(targetRef=ref)).spec.target_name == "web"
    rejects(minimal(targetRef={**ref, "kind": "Deployment"}), "spec.targetRef.kind", "only")
    rejects(minimal(targetRef={**ref, "apiVersion": "autoscaling/v1"}), "spec.targetRef.apiVersion")
    rejects(minimal(targetRef={"kind": "HorizontalPodAutoscaler"}), "spec.targetRef.name")


@pytest.mark.parametrize("missing", ["targetRef", "forecast", "capacity"])
def test_required_spec_fields(missing: str) -> None:
    rejects(minimal(**{missing: None}), f"spec.{missing}", "required field is missing")


def test_api_version_kind_and_name_are_checked() -> None:
    rejects({**minimal(), "apiVersion": "floorcast.dev/v1"}, "apiVersion", API_VERSION)
    rejects({**minimal(), "kind": "Policy"}, "kind", KIND)
    rejects({**minimal(), "metadata": {"namespace": "shop"}}, "metadata.name", "required")
    rejects({**minimal(), "metadata": {"name": "Web"}}, "metadata.name", "not valid")
    doc = {k: v for k, v in minimal().items() if k != "spec"}
    rejects(doc, "spec", "required")


def test_yaml_syntax_error_names_the_line() -> None:
    text = yaml.safe_dump(minimal(), sort_keys=False).replace(
        "  capacity:", "  capacity: [unclosed"
    )
    line = next(i for i, s in enumerate(text.splitlines(), 1) if "unclosed" in s)
    with pytest.raises(PolicyError) as caught:
        load_policy_text(text, source=SOURCE)
    assert str(caught.value).startswith(f"{SOURCE}: line ")
    assert caught.value.line is not None and caught.value.line >= line
    assert "invalid YAML" in str(caught.value)


def test_duplicate_yaml_keys_are_rejected() -> None:
    text = yaml.safe_dump(minimal(), sort_keys=False) + "  leadTime: 5m\n  leadTime: 1h\n"
    with pytest.raises(PolicyError, match="duplicate key 'leadTime'") as caught:
        load_policy_text(text, source=SOURCE)
    assert caught.value.line == len(text.splitlines())


@pytest.mark.parametrize("text", ["- apiVersion: floorcast.dev/v1alpha1\n", "just words\n", "42"])
def test_document_that_is_not_a_mapping_is_rejected(text: str) -> None:
    with pytest.raises(PolicyError, match=r"document 1 is .*expected a mapping") as caught:
        load_policy_text(text, source=SOURCE)
    assert str(caught.value).startswith(f"{SOURCE}: ")


def test_parse_policy_rejects_a_non_mapping() -> None:
    with pytest.raises(PolicyError, match="expected a mapping"):
        parse_policy(["not", "a", "mapping"], source=SOURCE)  # type: ignore[arg-type]


def test_policy_error_is_input_error() -> None:
    err = rejects(minimal(headroom=-1), "spec.headroom")
    assert isinstance(err, InputError)
    assert err.source == SOURCE
