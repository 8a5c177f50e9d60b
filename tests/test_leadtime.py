"""``leadTime: auto`` (docs/policy.md, "Measured lead time"): the measurement, the Pod
filter, and the operator's use of it — without a cluster (e2e/test_living_leadtime.py
measures real Pods)."""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pytest

from floorcast.controller import leadtime as ctl
from floorcast.core import leadtime
from floorcast.kube.pods import PodTimes, pod_times, selector_string
from floorcast.policy import parse_policy

S = timedelta(seconds=1)


def _policy(**spec):
    body = {"apiVersion": "floorcast.dev/v1alpha1", "kind": "ForecastScalingPolicy",
            "metadata": {"name": "p", "namespace": "shop"},
            "spec": {"targetRef": {"name": "web"}, "capacity": {"perReplica": 1},
                     "forecast": {"configMapRef": {"name": "f", "key": "f.json"}},
                     "leadTime": "auto", **spec}}
    return parse_policy(body, source="t")


def test_nearest_rank_percentile_matches_the_textbook_example():
    # The nearest-rank method's worked example (Wikipedia, "Percentile", from memory):
    # for 15, 20, 35, 40, 50 the 30th and 40th percentiles are 20, the 50th is 35 and
    # the 100th is 50; rank = ceil(P/100 × N).
    x = np.array([50, 15, 40, 20, 35.0])
    assert [leadtime.percentile(x, q) for q in (0.3, 0.4, 0.5, 1.0)] == [20, 20, 35, 50]
    assert leadtime.percentile(x) == 50  # p90: rank ceil(4.5) = 5
    # The same ranks by hand for a longer list: p90 of 1..20 is the 18th value.
    assert leadtime.percentile(np.arange(1, 21.0)) == 18


def test_startups_drop_unready_and_glitches_and_keep_the_newest():
    created = np.array([100, 200, 300, 400.0])
    ready = np.array([140, np.nan, 290, 445.0])  # 40 s; not Ready; before creation; 45 s
    assert leadtime.startups(created, ready).tolist() == [45, 40]  # newest first
    many = leadtime.startups(np.arange(80.0), np.arange(80.0) + np.repeat([99, 7], [30, 50]))
    assert len(many) == leadtime.MAX_SAMPLES and set(many) == {7}  # only the newest 50


def test_measure_clamps_and_falls_back_below_three_samples():
    kw = dict(margin=30 * S, low=60 * S, high=600 * S, fallback=300 * S)
    m = leadtime.measure(np.array([40, 41, 44.0]), **kw)
    assert (m.lead, m.startup, m.samples, m.measured) == (74 * S, 44, 3, True)
    assert leadtime.measure(np.array([5, 5, 5.0]), **kw).lead == 60 * S  # raised to min
    assert leadtime.measure(np.array([900, 900, 900.0]), **kw).lead == 600 * S  # capped
    thin = leadtime.measure(np.array([40, 41.0]), **kw)
    assert (thin.lead, thin.measured, thin.startup) == (300 * S, False, None)


def _pod(owner: str, created: str, ready: str | None, *, restarts: int = 0,
         deleting: bool = False) -> dict:  # fmt: skip
    conds = [{"type": "Ready", "status": "True" if ready else "False",
              "lastTransitionTime": ready or created}]  # fmt: skip
    meta = {"creationTimestamp": created, "ownerReferences": [{"uid": owner}]}
    if deleting:
        meta["deletionTimestamp"] = ready
    return {"metadata": meta, "status": {"conditions": conds,
                                         "containerStatuses": [{"restartCount": restarts}]}}


def test_pod_times_measure_only_the_owners_clean_start_ups():
    t0 = "2026-12-03T10:00:00Z"
    pods = [
        _pod("rs-new", t0, "2026-12-03T10:00:42Z"),
        _pod("rs-old", t0, "2026-12-03T10:00:05Z"),  # another revision
        _pod("rs-new", t0, "2026-12-03T10:09:00Z", restarts=1),  # Ready again after a crash
        _pod("rs-new", t0, "2026-12-03T10:00:30Z", deleting=True),
        _pod("rs-new", t0, None),  # not Ready yet
    ]
    got = pod_times(pods, "rs-new", "ReplicaSet web-1")
    assert len(got.created) == 2
    assert got.ready[0] - got.created[0] == 42 and np.isnan(got.ready[1])


def test_selector_string_is_the_label_selector_syntax():
    # Kubernetes docs, "Labels and Selectors": equality- and set-based requirements.
    sel = {"matchLabels": {"app": "web", "tier": "front"},
           "matchExpressions": [{"key": "env", "operator": "In", "values": ["a", "b"]},
                                {"key": "canary", "operator": "DoesNotExist"},
                                {"key": "zone", "operator": "NotIn", "values": ["x"]},
                                {"key": "team", "operator": "Exists"}]}  # fmt: skip
    assert selector_string(sel) == "app=web,tier=front,env in (a,b),!canary,zone notin (x),team"
    with pytest.raises(ValueError, match="Gt"):
        selector_string({"matchExpressions": [{"key": "k", "operator": "Gt"}]})


def _times(*startups: float) -> PodTimes:
    return PodTimes([0.0] * len(startups), list(startups), "ReplicaSet web-7")


def test_resolve_plans_with_the_measured_lead_and_lists_pods_at_most_every_5_minutes():
    calls = []

    def read(ns, target):
        calls.append((ns, target))
        return _times(38, 40, 41, 45), None

    mem, pol = ctl.LeadMemory(), _policy()
    target = ("apps/v1", "Deployment", "web")
    out, lead = ctl.resolve(mem, ("shop", "p"), pol, target, read, now=1000.0)
    # p90 of 38, 40, 41, 45 is the 4th (rank ceil(3.6)); + 30 s margin.
    assert out.spec.lead_time == 75 * S and lead.status == {
        "value": "1m15s", "source": "Measured", "samples": 4, "podStartup": "45s"}
    assert lead.condition.status is True
    assert "p90 pod start-up 45s over 4 Pods" in lead.condition.message
    ctl.resolve(mem, ("shop", "p"), pol, target, read, now=1000.0 + ctl.REMEASURE_SECONDS - 1)
    assert len(calls) == 1
    # An edit of leadTimeAuto applies at once, from the Pods already listed.
    edited = _policy(leadTimeAuto={"margin": "0s"})
    out, _ = ctl.resolve(mem, ("shop", "p"), edited, target, read, now=1001.0)
    assert out.spec.lead_time == 45 * S
    ctl.resolve(mem, ("shop", "p"), pol, target, read, now=1000.0 + ctl.REMEASURE_SECONDS)
    assert len(calls) == 2


def test_resolve_falls_back_safely_without_pods_or_permission():
    pol, target = _policy(), ("apps/v1", "Deployment", "web")
    _, none = ctl.resolve(ctl.LeadMemory(), ("shop", "p"), pol, target,
                          lambda ns, t: (_times(), None), now=0.0)  # fmt: skip
    assert none.measurement.lead == 5 * 60 * S and none.status["source"] == "Default"
    assert none.condition.reason == ctl.TOO_FEW_PODS and "0 Ready Pods" in none.condition.message

    class Forbidden(Exception):
        status = 403

    def denied(ns, t):
        raise Forbidden()

    out, lead = ctl.resolve(ctl.LeadMemory(), ("shop", "p"), pol, target, denied, now=0.0)
    assert out.spec.lead_time == 5 * 60 * S and lead.condition.reason == ctl.PODS_UNREADABLE
    assert "HTTP 403" in lead.condition.message
    _, gone = ctl.resolve(ctl.LeadMemory(), ("shop", "p"), pol, target,
                          lambda ns, t: (None, "the scale target Deployment web was not found"),
                          now=0.0)  # fmt: skip
    assert gone.condition.reason == ctl.PODS_UNREADABLE and "not found" in gone.condition.message


def test_a_fixed_lead_time_is_left_alone_and_forgotten():
    mem = ctl.LeadMemory()
    mem.entries[("shop", "p")] = (0.0, _times(40, 40, 40), None)
    pol = parse_policy({"apiVersion": "floorcast.dev/v1alpha1", "kind": "ForecastScalingPolicy",
                        "metadata": {"name": "p", "namespace": "shop"},
                        "spec": {"targetRef": {"name": "web"}, "capacity": {"perReplica": 1},
                                 "forecast": {"configMapRef": {"name": "f", "key": "f.json"}},
                                 "leadTime": "2m"}},
                       source="t")  # fmt: skip
    out, lead = ctl.resolve(mem, ("shop", "p"), pol, None, lambda *a: pytest.fail("listed"),
                            now=1.0)  # fmt: skip
    assert out is pol and lead is None and not mem.entries


def test_decide_plans_with_the_measured_lead_and_reports_it_once():
    from dataclasses import replace as dc_replace

    from test_reconcile import TEN_MIN, observed, policy

    from floorcast.controller.decide import decide

    target = ("apps/v1", "Deployment", "web")
    fixed = decide(observed(policy(leadTime="15m")))
    assert fixed.floor == 7  # the peak 10 minutes ahead is inside a 15m lead
    pol, lead = ctl.resolve(ctl.LeadMemory(), ("ns", "p"), policy(leadTime="auto"), target,
                            lambda ns, t: (_times(40, 42, 45), None), now=0.0)  # fmt: skip
    assert pol.spec.lead_time == 75 * S < TEN_MIN  # measured: 45 s + 30 s
    d = decide(observed(pol, lead=lead))
    assert d.floor == 2  # 75 s ahead the load is still the off-peak 1.5
    assert d.status["leadTime"]["value"] == "1m15s"
    c = next(c for c in d.status["conditions"] if c["type"] == "LeadTimeMeasured")
    assert (c["status"], c["reason"]) == ("True", "Measured")
    again = decide(dc_replace(observed(pol, lead=lead), status=d.status))
    assert not again.status_changed  # the same measurement rewrites nothing
