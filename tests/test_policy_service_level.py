"""``spec.serviceLevel``: the same bounds in policy.py and the CRD (docs/policy.md)."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from floorcast import policy
from floorcast.policy import PolicyError, parse_spec

ROOT = Path(__file__).resolve().parents[1]
BASE = {"targetRef": {"name": "a"}, "forecast": {"url": "http://x/"},
        "capacity": {"perReplica": 1}}  # fmt: skip


def test_crd_bounds_are_policy_bounds_in_both_copies() -> None:
    for crd in ("crds", "charts/floorcast/crds"):
        path = ROOT / crd / "forecastscalingpolicies.floorcast.dev.yaml"
        doc = yaml.safe_load(path.read_text())
        prop = doc["spec"]["versions"][0]["schema"]["openAPIV3Schema"]["properties"]["spec"][
            "properties"]["serviceLevel"]  # fmt: skip
        assert (prop["minimum"], prop["maximum"]) == (
            policy.MIN_SERVICE_LEVEL, policy.MAX_SERVICE_LEVEL) == (0.5, 0.999)  # fmt: skip
        assert "default" not in prop and not prop.get("exclusiveMinimum")


@pytest.mark.parametrize("level", [0.5, 0.9, 0.999, 1 - 1e-3])
def test_levels_at_and_inside_the_bounds_parse(level: float) -> None:
    assert parse_spec({**BASE, "serviceLevel": level}).service_level == level


@pytest.mark.parametrize("level", [0.4999, 0.9991, 1, 0, -0.5, float("nan"), True, "0.9"])
def test_levels_outside_the_bounds_are_refused(level: object) -> None:
    with pytest.raises(PolicyError, match=r"spec\.serviceLevel"):
        parse_spec({**BASE, "serviceLevel": level})


def test_unset_means_none() -> None:
    assert parse_spec(BASE).service_level is None
    assert parse_spec({**BASE, "serviceLevel": None}).service_level is None
