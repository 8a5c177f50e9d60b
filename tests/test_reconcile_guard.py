"""The accuracy guard and the floor's cost in the reconcile decision
(controller/accuracy.py; docs/policy.md "Accuracy guard", "Cost of the floor")."""

from __future__ import annotations

from dataclasses import replace

import pandas as pd
import pytest
from test_reconcile import NOW, observed, policy
from test_reconcile_live import FC, status_hpa

from floorcast.controller.decide import decide
from floorcast.policy import PolicyError, parse_spec

GUARD = {"enabled": True, "window": "2m", "recoverAfter": "1m", "maxError": 0.5}


def run(util: int | None, steps: int, *, pol=None, d=None, start=None):
    """``steps`` reconciles 10 s apart, carrying the memory as the adapter does."""
    pol = pol or policy(accuracyGuard=GUARD)
    start = start if start is not None else NOW - (steps - 1) * pd.Timedelta("10s")
    out = []
    for i in range(steps):
        obs = replace(observed(pol, h=status_hpa(util), fc=FC), now=start + i * pd.Timedelta("10s"),
                      guard=d.guard_memory if d else None, status=d.status if d else {})
        d = decide(obs)
        out.append(d)
    return out


def _cond(d, type_="ForecastAccurate"):
    return next(c for c in d.status["conditions"] if c["type"] == type_)


def test_no_hpa_metrics_says_so_and_keeps_the_plan():
    ds = run(None, 30)
    c = _cond(ds[-1])
    assert c["status"] == "Unknown" and c["reason"] == "NotJudged"
    assert "no current CPU utilization" in c["message"]
    plain = decide(observed(policy(), h=status_hpa(None), fc=FC))
    assert ds[-1].floor == plain.floor  # not tripped: the plan stands


def test_a_load_far_from_the_forecast_trips_to_the_lower_bound_once():
    # The forecast (tests/test_reconcile.py) is 1.5 near NOW; 4 pods at 200 % of a
    # 50 % target carry 16: WAPE (16 − 1.5)/16 = 91 % > 50 %.
    ds = run(200, 20, start=NOW - pd.Timedelta("30m"))
    tripped = [d for d in ds if _cond(d)["status"] == "False"]
    assert tripped, [(_cond(d)["reason"], _cond(d)["message"]) for d in ds]
    d = tripped[-1]
    assert d.floor == d.status["baseline"] and "WAPE 9" in _cond(d)["message"]
    warnings = [e for x in ds for e in x.events if e.reason == "ForecastInaccurate"]
    assert len(warnings) == 1 and warnings[0].type == "Warning"
    # Idempotent: one more reconcile with the same world rewrites nothing.
    again = run(200, 1, d=ds[-1], start=NOW - pd.Timedelta("30m") + 20 * pd.Timedelta("10s"))
    assert again[-1].status["accuracy"] == ds[-1].status["accuracy"]


def test_recovers_after_the_hold_off_when_load_matches_again():
    ds = run(200, 20, start=NOW - pd.Timedelta("30m"))
    # Back near the forecast: 4 pods × 18 % of 50 % carry 1.44 (≤ 1.5, headroom 0).
    back = run(18, 40, d=ds[-1], start=NOW - pd.Timedelta("30m") + 20 * pd.Timedelta("10s"))
    states = [_cond(d)["status"] for d in back]
    assert states[0] == "False" and states[-1] == "True"
    assert any(e.reason == "ForecastAccurateAgain" for d in back for e in d.events)


def test_cost_counts_replica_hours_above_the_hpa_alone():
    pol = policy(mode="Enforce")
    ds = run(19, 31, pol=pol, start=NOW - pd.Timedelta("5m"))
    d = ds[-1]
    # HPA alone: ceil(4 × 19 / 50) = 2 (Kubernetes HPA algorithm); the floor adds
    # floor − 2 for 300 s (30 intervals of 10 s).
    assert d.added_replica_hours == pytest.approx(max(d.floor - 2, 0) * 300 / 3600)


@pytest.mark.parametrize(("field", "value", "says"), [
    ("maxError", 0, "maxError"), ("maxError", 11, "maxError"),
    ("maxExceedance", 1.5, "maxExceedance"), ("window", "30s", "at least 1m"),
    ("action", "Panic", "Baseline, LiveCorrected"), ("recoverAfter", "1d", "recoverAfter"),
    ("action", "", "Baseline, LiveCorrected"),  # the CRD's enum refuses "" too
])  # fmt: skip
def test_out_of_range_thresholds_are_refused_with_the_field(field, value, says):
    spec = {"targetRef": {"name": "web"}, "forecast": {"url": "https://f.example/x"},
            "capacity": {"perReplica": 1}, "accuracyGuard": {field: value}}
    with pytest.raises(PolicyError, match=says) as e:
        parse_spec(spec, source="t")
    assert f"spec.accuracyGuard.{field}" in str(e.value)


@pytest.mark.parametrize(("prev", "value", "shown"), [
    (0.30, 0.33, 0.30),  # within a step, same side of 0.5: the old figure stays
    (0.30, 0.36, 0.36),  # a step or more: the new figure, rounded
    (0.49, 0.503, 0.51),  # tripped at 50.3 %: neither the old 0.49 nor round()'s 0.50
    (0.52, 0.49, 0.49),  # back within the limit: not the old 0.52
    (None, 0.5, 0.5),  # at the limit is within it (the guard trips above it)
    (None, 0.5001, 0.51),
])  # fmt: skip
def test_a_published_figure_stays_on_its_side_of_the_threshold(prev, value, shown):
    """Seen on the living cluster (e2e/test_living_guard.py): the guard tripped on a
    WAPE just above 50 % while the step-published figure still said 49 %, so the
    condition read "WAPE 49% (max 50%)"; the figure must agree with the verdict."""
    from floorcast.controller.accuracy import published_figure

    got = published_figure({"error": prev} if prev is not None else {}, "error", value, 0.5)
    assert got == pytest.approx(shown)
    assert (got > 0.5) == (value > 0.5)
