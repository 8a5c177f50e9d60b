"""Issue #14, items 1 and 5: fail safe always, and a baseline that survives stripped
annotations. Pure decisions (no API server); the same on a real control plane is in
e2e/test_operator_hardening.py.

Expected floors follow the floor rule of docs/policy.md, as in tests/test_reconcile.py:
a one-step peak of 6.5 with perReplica 1 and headroom 0 needs ceil(6.5) = 7 replicas.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import pytest
from test_reconcile import MANAGED, cond, hpa, observed, policy

from floorcast.controller import decide as decide_mod
from floorcast.controller import failsafe, reconcile
from floorcast.controller.decide import ANN_BASELINE, ANN_FLOOR, ANN_POLICY, decide
from floorcast.controller.state import ForecastState

RAISED = {"baseline": 2, "floor": 7}  # what our status said while the floor was raised


def _boom(*_: Any, **__: Any) -> Any:
    raise OverflowError("Python int too large to convert to C int")


def test_a_bug_in_planning_restores_and_says_so(monkeypatch):
    # 9999999999h used to get past parsing and fail in planning (OutOfBoundsTimedelta).
    monkeypatch.setattr(decide_mod, "plan_policy", _boom)
    d = decide(observed(h=hpa(7, **MANAGED)))
    assert d.hpa_patch is not None and d.hpa_patch.min_replicas == 2
    assert cond(d, "Ready")["reason"] == "ForecastInvalid"
    assert "OverflowError" in cond(d, "Ready")["message"]
    assert "too large" not in cond(d, "Ready")["message"]  # the kind, not the text


def test_a_bug_in_decide_falls_back_to_the_baseline(monkeypatch):
    monkeypatch.setattr(failsafe, "decide", _boom)
    d = failsafe.decide_safely(observed(h=hpa(7, **MANAGED)))
    assert d.hpa_patch is not None and d.hpa_patch.min_replicas == 2
    assert d.hpa_patch.annotations == {ANN_BASELINE: None, ANN_FLOOR: None, ANN_POLICY: None}
    assert cond(d, "Ready") | {"lastTransitionTime": "x"} == cond(d, "Ready") | {
        "status": "False", "reason": "ReconcileFailed", "lastTransitionTime": "x"}  # fmt: skip
    assert [e.reason for e in d.events] == ["ReconcileFailed", "BaselineRestored"]
    assert d.status["baseline"] == 2 and d.status["floor"] == 2


def test_the_fail_safe_leaves_other_hpas_alone(monkeypatch):
    monkeypatch.setattr(failsafe, "decide", _boom)
    other = failsafe.decide_safely(observed(h=hpa(7, **{**MANAGED, ANN_POLICY: "other"})))
    unmanaged = failsafe.decide_safely(observed(h=hpa(7)))
    assert other.hpa_patch is None and unmanaged.hpa_patch is None
    assert cond(unmanaged, "Ready")["reason"] == "ReconcileFailed"


def test_the_fail_safe_on_delete_restores_and_writes_no_status(monkeypatch):
    monkeypatch.setattr(failsafe, "decide", _boom)
    d = failsafe.decide_safely(observed(h=hpa(7, **MANAGED), deleting=True))
    assert d.hpa_patch is not None and d.hpa_patch.min_replicas == 2 and d.status is None


def test_a_policy_parser_bug_is_a_policy_error(monkeypatch):
    monkeypatch.setattr(reconcile, "parse_policy", _boom)
    pol, err = reconcile._policy({"metadata": {}}, "ForecastScalingPolicy ns/p")
    assert pol is None and err is not None and "OverflowError" in err


def test_the_issue_hold_time_is_a_policy_error_not_an_exception():
    body = {"apiVersion": "floorcast.dev/v1alpha1", "kind": "ForecastScalingPolicy",
            "metadata": {"name": "p", "namespace": "ns"},
            "spec": {"targetRef": {"name": "web"}, "capacity": {"perReplica": 1},
                     "forecast": {"configMapRef": {"name": "fc", "key": "k"}},
                     "holdTime": "99999999999999h"}}  # fmt: skip
    pol, err = reconcile._policy(body, "ForecastScalingPolicy ns/p")
    assert pol is None and "spec.holdTime" in (err or "")
    d = decide(replace(observed(h=hpa(15, **{**MANAGED, ANN_FLOOR: "15"})), policy=None,
                       policy_error=err))  # fmt: skip
    assert d.hpa_patch is not None and d.hpa_patch.min_replicas == 2


def test_operator_dry_run_restores_on_delete_and_on_lost_forecast():
    gone = ForecastState(reason="ForecastMissing", message="ConfigMap ns/fc: not found")
    for obs in (observed(h=hpa(7, **MANAGED), deleting=True, operator_dry_run=True),
                observed(h=hpa(7, **MANAGED), fc=gone, operator_dry_run=True)):  # fmt: skip
        d = decide(obs)
        assert d.hpa_patch is not None and d.hpa_patch.min_replicas == 2
    # ...but it never raises anything.
    d = decide(observed(operator_dry_run=True))
    assert d.hpa_patch is None and d.status["proposedFloor"] == 7


# ---------------------------------------------------------------- item 5: durable baseline


def test_stripped_annotations_recover_the_baseline_from_status():
    d = decide(observed(h=hpa(7), status=RAISED))
    # Still floor 7 (the peak), but the baseline is 2 again, written back to the HPA.
    assert d.hpa_patch is not None and d.hpa_patch.min_replicas == 7
    assert d.hpa_patch.annotations[ANN_BASELINE] == "2"
    assert d.status["baseline"] == 2
    assert d.events[0].reason == "BaselineRecovered"


@pytest.mark.parametrize("kw", [
    {"fc": ForecastState(reason="ForecastMissing", message="gone")},
    {"deleting": True},
    {"operator_dry_run": True},
])  # fmt: skip
def test_recovered_baseline_is_what_a_restore_writes(kw):
    d = decide(observed(h=hpa(7), status=RAISED, **kw))
    assert d.hpa_patch is not None and d.hpa_patch.min_replicas == 2


def test_an_owner_edit_is_not_mistaken_for_our_floor():
    # minReplicas 5 is not the floor we recorded: the owner's own value, kept.
    d = decide(observed(h=hpa(5), status=RAISED, fc=ForecastState(reason="ForecastMissing",
                                                                 message="gone")))  # fmt: skip
    assert d.hpa_patch is None and d.status["baseline"] == 5
    # And a status at the baseline (floor == baseline) recovers nothing.
    d = decide(observed(policy("DryRun"), h=hpa(7), status={"baseline": 2, "floor": 2}))
    assert d.status["baseline"] == 7
