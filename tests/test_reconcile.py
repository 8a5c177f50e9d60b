"""The reconcile decision as a pure function of observed state, one row per case.

Expected floors are worked by hand from the floor rule (docs/policy.md), floor(now) =
clamp(max r(t) for t in [now − H, now + L], baseline, ceiling), with
r(t) = ceil(load × (1 + headroom) / perReplica): with perReplica 1, headroom 0 and a
peak load of 6.5 the peak needs ceil(6.5) = 7 replicas.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd
import pytest

from floorcast.controller.decide import (
    ANN_BASELINE,
    ANN_FLOOR,
    ANN_POLICY,
    ForecastState,
    HpaState,
    Observed,
    conflict_winner,
    decide,
)
from floorcast.core.series import Series
from floorcast.policy import parse_policy

NOW = pd.Timestamp("2026-03-02T12:00:00Z")
STEP = pd.Timedelta("5m")


def policy(mode: str = "Enforce", **spec: Any):
    body = {
        "targetRef": {"name": "web"},
        "forecast": {"configMapRef": {"name": "fc", "key": "forecast.json"}},
        "capacity": {"perReplica": 1.0},
        "leadTime": "15m",
        "holdTime": "0s",
        "headroom": 0,
        "mode": mode,
    }
    body.update(spec)
    doc = {"apiVersion": "floorcast.dev/v1alpha1", "kind": "ForecastScalingPolicy",
           "metadata": {"name": "p", "namespace": "ns", "generation": 3}, "spec": body}  # fmt: skip
    return parse_policy(doc)


TEN_MIN, HOUR_AGO = pd.Timedelta("10m"), NOW - pd.Timedelta("1h")


def forecast(peak_in: pd.Timedelta | None = TEN_MIN, *, generated=NOW, hours: float = 2,
             start=HOUR_AGO) -> Series:  # fmt: skip
    """Flat load 1.5 (needs 2) with a one-step peak of 6.5 (needs 7) at now + ``peak_in``."""
    n = int(pd.Timedelta(hours=hours) / STEP)
    values = np.full(n, 1.5)
    if peak_in is not None:
        values[int((NOW + peak_in - start) / STEP)] = 6.5
    return Series(start=start, step=STEP, values=values, generated=generated, source="cm ns/fc")


def hpa(min_replicas: int = 2, max_replicas: int = 10, **ann: str) -> HpaState:
    return HpaState(True, min_replicas, max_replicas, dict(ann), resource_version="41")


MANAGED = {ANN_BASELINE: "2", ANN_FLOOR: "7", ANN_POLICY: "p"}


def observed(pol=None, h: HpaState | None = None, fc: ForecastState | None = None, **kw):
    pol = pol or policy()
    return Observed(
        name="p", namespace="ns", policy=pol, hpa=h or hpa(),
        forecast=fc or ForecastState(series=forecast()), now=NOW, generation=3, **kw,
    )  # fmt: skip


def cond(d, type_: str) -> dict[str, Any]:
    return next(c for c in d.status["conditions"] if c["type"] == type_)


# (case, observed, expected minReplicas patched or None, Ready reason, event reasons)
CASES = [
    ("enforce raises", observed(), 7, "FloorApplied", ["FloorRaised"]),
    ("enforce lowers back after peak",
     observed(h=hpa(7, **MANAGED), fc=ForecastState(series=forecast(None))), 2, "FloorApplied",
     ["FloorLowered"]),
    ("dry-run proposes, no write", observed(policy("DryRun")), None, "DryRun", ["DryRun"]),
    ("operator-wide dry-run, no write", observed(operator_dry_run=True), None, "DryRun",
     ["DryRun"]),
    ("stale: generated older than maxAge",
     observed(fc=ForecastState(series=forecast(generated=NOW - pd.Timedelta("7h")))), None,
     "ForecastStale", ["ForecastStale"]),
    ("stale: ends before now + leadTime",
     observed(h=hpa(7, **MANAGED), fc=ForecastState(series=forecast(None, hours=1.2))), 2,
     "ForecastStale", ["BaselineRestored", "ForecastStale"]),
    ("invalid forecast restores",
     observed(h=hpa(7, **MANAGED), fc=ForecastState(reason="ForecastInvalid", message="row 3")),
     2, "ForecastInvalid", ["BaselineRestored", "ForecastInvalid"]),
    ("missing forecast, unmanaged HPA untouched",
     observed(fc=ForecastState(reason="ForecastMissing", message="no ConfigMap")), None,
     "ForecastMissing", ["ForecastMissing"]),
    ("url not allowed restores",
     observed(h=hpa(7, **MANAGED), fc=ForecastState(reason="UrlNotAllowed", message="host x")),
     2, "UrlNotAllowed", ["BaselineRestored", "UrlNotAllowed"]),
    ("target missing", observed(h=HpaState(False)), None, "TargetNotFound", []),
    ("conflict writes nothing", observed(h=hpa(2), conflict_with="older"), None,
     "TargetConflict", []),
    ("switch to DryRun restores baseline", observed(policy("DryRun"), h=hpa(7, **MANAGED)), 2,
     "DryRun", ["BaselineRestored", "DryRun"]),
    # Issue #14: restoring is always allowed, also under operator-wide --dry-run.
    ("operator dry-run restores a floor raised before",
     observed(h=hpa(7, **MANAGED), operator_dry_run=True), 2, "DryRun",
     ["BaselineRestored", "DryRun"]),
    ("operator dry-run, lost forecast restores",
     observed(h=hpa(7, **MANAGED), operator_dry_run=True,
              fc=ForecastState(reason="ForecastMissing", message="gone")),
     2, "ForecastMissing", ["BaselineRestored", "ForecastMissing"]),
    ("DryRun with a bad forecast restores the floor it had",
     observed(policy("DryRun"), h=hpa(7, **MANAGED),
              fc=ForecastState(reason="ForecastMissing", message="gone")),
     2, "ForecastMissing", ["BaselineRestored", "ForecastMissing"]),
    ("capacity unknown restores",
     observed(h=hpa(7, **MANAGED), per_replica_error="no CPU request on the pods"), 2,
     "CapacityUnknown", ["BaselineRestored", "CapacityUnknown"]),
    ("invalid policy restores the HPA it raised",
     replace(observed(h=hpa(7, **MANAGED)), policy=None, policy_error="spec.leadTime: bad"), 2,
     "PolicyInvalid", ["PolicyInvalid", "BaselineRestored"]),
    ("invalid policy leaves another policy's HPA alone",
     replace(observed(h=hpa(7, **{**MANAGED, ANN_POLICY: "other"})), policy=None,
             policy_error="spec.leadTime: bad"), None, "PolicyInvalid", ["PolicyInvalid"]),
    ("invalid policy under operator dry-run restores too",
     replace(observed(h=hpa(7, **MANAGED), operator_dry_run=True), policy=None,
             policy_error="spec.leadTime: bad"), 2, "PolicyInvalid",
     ["PolicyInvalid", "BaselineRestored"]),
    ("hand edit under operator dry-run: adopted, our annotations dropped",
     observed(h=hpa(4, **MANAGED), operator_dry_run=True), 4, "DryRun",
     ["BaselineAdopted", "BaselineRestored", "DryRun"]),
    ("hand edit in DryRun with a bad forecast: adopted and restored",
     observed(policy("DryRun"), h=hpa(4, **MANAGED),
              fc=ForecastState(reason="ForecastStale", message="old")),
     4, "ForecastStale", ["BaselineAdopted", "BaselineRestored", "ForecastStale"]),
]  # fmt: skip


@pytest.mark.parametrize(("case", "obs", "patched", "ready", "events"), CASES,
                         ids=[c[0] for c in CASES])  # fmt: skip
def test_decision_table(case, obs, patched, ready, events) -> None:
    d = decide(obs)
    assert (d.hpa_patch.min_replicas if d.hpa_patch else None) == patched
    assert cond(d, "Ready")["reason"] == ready
    assert [e.reason for e in d.events] == events
    if d.hpa_patch is not None:
        # Never below the owner's baseline, never maxReplicas or metrics.
        assert d.hpa_patch.min_replicas >= 2
        assert set(d.hpa_patch.body()["spec"]) == {"minReplicas"}
        assert d.hpa_patch.body()["metadata"]["resourceVersion"] == "41"
    assert d.status["observedGeneration"] == 3


def test_raise_records_baseline_and_floor_in_annotations() -> None:
    d = decide(observed())
    assert d.hpa_patch.annotations == {ANN_BASELINE: "2", ANN_FLOOR: "7", ANN_POLICY: "p"}
    assert d.status["floor"] == 7 and d.status["baseline"] == 2
    assert d.status["lastAppliedTime"] == "2026-03-02T12:00:00Z"
    assert "peak at 2026-03-02T12:10:00Z" in d.events[0].message


def test_restore_removes_our_annotations() -> None:
    d = decide(observed(policy("DryRun"), h=hpa(7, **MANAGED)))
    assert d.hpa_patch.annotations == {ANN_BASELINE: None, ANN_FLOOR: None, ANN_POLICY: None}


def test_dry_run_event_text_and_status() -> None:
    d = decide(observed(policy("DryRun")))
    assert d.events[0].message.startswith(
        "would set minReplicas 2 → 7 (peak at 2026-03-02T12:10:00Z); why: value 6.5 in the 1m "
        "from 2026-03-02T12:09:00Z × (1 + headroom 0) / perReplica 1 = 6.5 → 7 replicas")
    assert d.status["proposedFloor"] == 7 and "floor" not in d.status
    assert cond(d, "Applied") == {**cond(d, "Applied"), "status": "False", "reason": "DryRun"}


def test_stale_message_names_max_age() -> None:
    d = decide(observed(fc=ForecastState(series=forecast(generated=NOW - pd.Timedelta("7h")))))
    assert "older than maxAge 6h" in cond(d, "ForecastAvailable")["message"]
    assert cond(d, "ForecastAvailable")["status"] == "False"


def test_hand_edit_becomes_the_new_baseline() -> None:
    d = decide(observed(h=hpa(4, **MANAGED)))  # owner set 4 while our floor 7 was in force
    assert [e.reason for e in d.events] == ["BaselineAdopted", "FloorRaised"]
    assert d.hpa_patch.annotations[ANN_BASELINE] == "4"
    assert d.hpa_patch.min_replicas == 7 and d.status["baseline"] == 4


def test_hand_edit_above_the_floor_is_kept() -> None:
    d = decide(observed(h=hpa(9, **MANAGED)))
    assert d.hpa_patch is not None and d.hpa_patch.min_replicas == 9  # never lowered below it
    assert d.hpa_patch.annotations[ANN_BASELINE] is None  # back to plain owner state


def test_deletion_restores_baseline_and_only_for_the_owner() -> None:
    d = decide(observed(h=hpa(7, **MANAGED), deleting=True))
    assert d.hpa_patch.min_replicas == 2 and d.status is None
    assert d.hpa_patch.annotations[ANN_POLICY] is None
    other = {**MANAGED, ANN_POLICY: "someone-else"}
    assert decide(observed(h=hpa(7, **other), deleting=True)).hpa_patch is None
    assert decide(observed(h=hpa(2), deleting=True)).hpa_patch is None
    # Issue #14: a delete under operator-wide --dry-run restores a floor raised before.
    dry = decide(observed(h=hpa(7, **MANAGED), deleting=True, operator_dry_run=True))
    assert dry.hpa_patch is not None and dry.hpa_patch.min_replicas == 2


def _second_run(obs: Observed) -> Observed:
    """What the next reconcile sees after the first decision was carried out."""
    d = decide(obs)
    h = obs.hpa
    if d.hpa_patch:
        ann = {**h.annotations, **d.hpa_patch.annotations}
        ann = {k: v for k, v in ann.items() if v is not None}
        h = replace(h, min_replicas=d.hpa_patch.min_replicas, annotations=ann,
                    resource_version="42")  # fmt: skip
    return replace(obs, hpa=h, status=d.status, now=NOW + pd.Timedelta("30s"))


@pytest.mark.parametrize(("case", "obs", "patched", "ready", "events"), CASES,
                         ids=[c[0] for c in CASES])  # fmt: skip
def test_second_run_changes_nothing(case, obs, patched, ready, events) -> None:
    d2 = decide(_second_run(obs))
    assert d2.hpa_patch is None
    assert not d2.status_changed, d2.status
    assert d2.events == ()


def test_last_transition_time_moves_only_when_status_flips() -> None:
    first = decide(observed())
    later = replace(observed(fc=ForecastState(reason="ForecastMissing", message="gone")),
                    status=first.status, now=NOW + pd.Timedelta("1m"))  # fmt: skip
    d = decide(later)
    assert cond(d, "Ready")["lastTransitionTime"] == "2026-03-02T12:01:00Z"
    assert cond(first, "Ready")["lastTransitionTime"] == "2026-03-02T12:00:00Z"


def test_policy_minimum_applies_and_ceiling_clamps() -> None:
    assert decide(observed(policy(maxReplicas=5))).hpa_patch.min_replicas == 5
    assert decide(observed(h=hpa(2, 6))).hpa_patch.min_replicas == 6
    d = decide(observed(policy(minReplicas=3), fc=ForecastState(series=forecast(None))))
    assert d.hpa_patch.min_replicas == 3


def test_conflict_goes_to_the_later_policy() -> None:
    assert conflict_winner(("2026-01-02T00:00:00Z", "b"), [("2026-01-01T00:00:00Z", "z")]) == "z"
    assert conflict_winner(("2026-01-01T00:00:00Z", "a"), [("2026-01-01T00:00:00Z", "b")]) is None
    assert conflict_winner(("2026-01-01T00:00:00Z", "b"), [("2026-01-01T00:00:00Z", "a")]) == "a"


def test_a_forecast_note_reaches_the_condition_and_stays_put() -> None:
    obs = observed(fc=ForecastState(series=forecast(), note="ConfigMap fc is not labelled"))
    d = decide(obs)
    assert cond(d, "ForecastAvailable")["message"].endswith("; ConfigMap fc is not labelled")
    assert not decide(_second_run(obs)).status_changed
