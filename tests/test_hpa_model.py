"""The reactive HPA model against the Kubernetes documentation's own rules and examples.

[HPA doc] = https://kubernetes.io/docs/tasks/run-application/horizontal-pod-autoscale/
"""

from __future__ import annotations

import numpy as np
import pytest

from floorcast.core import hpa_model as hm

SYNC = 15


def test_formula_worked_examples_from_algorithm_details():
    # [HPA doc] "Algorithm details": metric 200m vs target 100m doubles the replicas,
    # 50m vs 100m halves them.
    assert hm.desired_replicas(4, 200, 100).item() == 8
    assert hm.desired_replicas(4, 50, 100).item() == 2
    # Blog "Kubernetes v1.33: HorizontalPodAutoscaler Configurable Tolerance"
    # (kubernetes.io, 2025-04-28): 50 replicas at 90 % vs a 75 % target -> 60.
    assert hm.desired_replicas(50, 90, 75).item() == 60


def test_tolerance_skips_small_ratios():
    # [HPA doc] "Algorithm details": within 0.1 of 1.0 nothing changes.
    assert hm.desired_replicas(10, 109, 100).item() == 10
    assert hm.desired_replicas(10, 91, 100).item() == 10
    assert hm.desired_replicas(10, 115, 100).item() == 12  # ceil(11.5)


def test_default_scale_up_limit_from_10_pods_and_from_3():
    zero = np.zeros((2, 1), dtype=np.int64)
    # [HPA doc] "Default behavior": 4 pods or 100 % per 15 s, whichever is more.
    assert hm.scale_up_limit(np.array([10]), zero, hm.DEFAULT_SCALE_UP).item() == 20
    assert hm.scale_up_limit(np.array([3]), zero, hm.DEFAULT_SCALE_UP).item() == 7


def test_scale_down_policy_example_from_the_docs():
    # [HPA doc] "Scaling policies": Pods 4 and Percent 10 per 60 s; at 80 replicas
    # 8 go, at 72 "10% ... is 7.2 but the number is rounded up to 8"; at 40 or fewer
    # the 4-pod policy allows more.
    rules = hm.ScalingRules(
        300, (hm.ScalingPolicy("Pods", 4, 60), hm.ScalingPolicy("Percent", 10, 60)), "Max"
    )
    zero = np.zeros((2, 1), dtype=np.int64)
    assert hm.scale_down_limit(np.array([80]), zero, rules).item() == 72
    assert hm.scale_down_limit(np.array([72]), zero, rules).item() == 64
    assert hm.scale_down_limit(np.array([30]), zero, rules).item() == 26


def test_rate_limit_adds_a_sync_per_doubling_on_a_big_step():
    t = 300
    demand = np.full(t, 2.0)
    demand[100:] = 10.0
    tr = hm.simulate(
        demand, np.ones((1, t), dtype=np.int64), per_replica=1.0,
        hpa=hm.HpaConfig(50, 0.8), ready_delay_steps=8,
    )  # fmt: skip
    # [HPA doc] "Default behavior": from 2 pods at most 4 more (Pods 4 > 100 %), so
    # 2 -> 6 at the first sync that sees the step and 6 -> 10 at the next.
    assert list(tr.replicas[0, 100:103]) == [2, 6, 10]


def _step_case(lead_steps: int, floor_ahead: int | None):
    t = 400
    demand = np.full(t, 4.0)
    demand[100:] = 8.0  # per_replica 1: needs 4 then 8 pods, one 100 % step
    mins = np.ones((1, t), dtype=np.int64)
    if floor_ahead is not None:
        mins[0, 100 - floor_ahead :] = 8
    tr = hm.simulate(
        demand, mins, per_replica=1.0, hpa=hm.HpaConfig(50, 0.8), ready_delay_steps=lead_steps
    )
    short = (demand > tr.ready[0] * 1.0 / 0.8).sum()
    return tr, int(short)


def test_step_shows_lag_of_lead_plus_sync_and_floor_ahead_removes_it():
    lead = 8  # 2 minutes of 15 s syncs
    tr, short = _step_case(lead, None)
    # The first sync after the step reads the step's interval one sync later, then
    # pods serve lead later: under capacity for lead + one sync period.
    assert short == lead + 1
    assert tr.replicas[0, 100] == 4 and tr.replicas[0, 101] == 8
    _, short = _step_case(lead, floor_ahead=lead)
    assert short == 0
    _, short = _step_case(lead, floor_ahead=lead - 2)
    assert short == 2  # a floor raised too late leaves the difference


def test_scale_down_waits_for_the_stabilization_window():
    t = 200
    demand = np.full(t, 10.0)
    demand[50:] = 2.0
    tr = hm.simulate(
        demand, np.ones((1, t), dtype=np.int64), per_replica=1.0,
        hpa=hm.HpaConfig(50, 0.8), ready_delay_steps=4,
    )  # fmt: skip
    # [HPA doc] "Default behavior": 300 s window -> the drop seen at sync 51 takes
    # effect once the last high recommendation (sync 50) leaves the window.
    first = int(np.flatnonzero(tr.replicas[0] < 10)[0])
    assert first == 50 + 300 // SYNC
    assert tr.replicas[0, first] == 2  # then 100 % may go at once


@pytest.mark.parametrize("seed", [1, 2])
def test_skipping_quiet_steps_changes_nothing(monkeypatch, seed):
    rng = np.random.default_rng(seed)
    t = 3000
    demand = 5 + 3 * np.sin(np.arange(t) / 90) + rng.normal(0, 0.4, t).clip(-2, 2)
    mins = np.ones((3, t), dtype=np.int64)
    mins[1, 1000:1300] = 9
    mins[2] = 4
    kw = dict(per_replica=1.0, hpa=hm.HpaConfig(12, 0.7), ready_delay_steps=np.array([0, 6, 20]))
    fast = hm.simulate(demand, mins, **kw)
    monkeypatch.setattr(hm._State, "advance", lambda self, k, *a: k)
    slow = hm.simulate(demand, mins, **kw)
    np.testing.assert_array_equal(fast.replicas, slow.replicas)
    np.testing.assert_array_equal(fast.ready, slow.ready)
    np.testing.assert_array_equal(fast.scaled, slow.scaled)
    assert fast.scaled.sum() > 10  # the case does scale


def test_metric_resolution_delays_the_reaction_to_the_newest_scrape():
    """With metrics-server scraping every 15 s (its documented default
    --metric-resolution) and the HPA syncing every 5 s, a step in load at t = 20 s is
    first seen by the sync after the scrape at t = 30 s, i.e. at t = 35 s; without a
    resolution the sync at 25 s (one interval later) already sees it."""
    demand = np.r_[np.full(4, 1.0), np.full(16, 4.0)]  # 5 s steps; rises at step 4
    base = dict(max_replicas=20, target_utilization=1.0, sync_seconds=5)
    fast = hm.simulate(demand, np.ones((1, 20), dtype=np.int64), per_replica=1.0,
                       hpa=hm.HpaConfig(**base), ready_delay_steps=0)  # fmt: skip
    slow = hm.simulate(demand, np.ones((1, 20), dtype=np.int64), per_replica=1.0,
                       hpa=hm.HpaConfig(**base, metric_resolution_seconds=15),
                       ready_delay_steps=0)  # fmt: skip
    assert int(np.argmax(fast.replicas[0] > 1)) == 5
    assert int(np.argmax(slow.replicas[0] > 1)) == 7
