"""The floor planner: hand-computed schedules, properties, and the HPA's replica rule."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from floorcast.core import planning
from floorcast.core.planning import PlanningError

T0 = pd.Timestamp("2026-12-01T00:00:00Z")
STEP = pd.Timedelta("5min")


def plan1(load, *, cap=1.0, headroom=0.0, lead="0s", hold="0s", lower=1, ceiling=100, factor=1.0):
    return planning.plan(
        T0,
        STEP,
        np.asarray(load, dtype=float)[None, :],
        per_replica=cap,
        headroom=headroom,
        lead=pd.Timedelta(lead),
        hold=pd.Timedelta(hold),
        lower=lower,
        ceiling=ceiling,
        event_factor=factor,
    )


# --- the replica arithmetic -------------------------------------------------------


def test_required_replicas_follow_the_hpa_ceiling_rule():
    # Kubernetes documentation, "Horizontal Pod Autoscaling", section "Algorithm
    # details": desiredReplicas = ceil[currentReplicas * (currentMetricValue /
    # desiredMetricValue)]. Its worked example (from memory of that page): a current
    # value of 200m against a desired 100m doubles the replicas; 50m halves them.
    # Seen from total load: 4 replicas at 200m carry 800m; per-replica target 100m.
    current, metric, target = 4, 0.200, 0.100
    total_load = current * metric
    assert planning.required_replicas([[total_load]], target)[0, 0] == 8 == 2 * current
    assert planning.required_replicas([[current * 0.050]], target)[0, 0] == 2 == current // 2
    # And a fractional need rounds up, as ceil does in the documented formula.
    assert planning.required_replicas([[0.81]], 0.8)[0, 0] == 2


def test_exact_multiples_do_not_gain_a_replica_from_float_error():
    # In float64 2.4 / 0.8 == 2.9999999999999996, 0.3 / 0.1 == 2.9999999999999996 and
    # 0.7 / 0.1 == 6.999999999999999: plain ceil would be right here by luck, but
    # 0.1 * 3 / 0.1 == 3.0000000000000004 would gain a pod without the epsilon.
    need = np.array([[2.4], [0.3], [0.7], [0.1 * 3]])
    cap = np.array([0.8, 0.1, 0.1, 0.1])
    assert planning.required_replicas(need, cap)[:, 0].tolist() == [3, 3, 7, 3]
    assert planning.ceil_replicas(np.array([3.0000000001, 3.0, 2.9999999999])).tolist() == [3, 3, 3]
    assert planning.ceil_replicas(np.array([3.000001]))[0] == 4  # a real extra need


def test_headroom_and_event_factor_multiply_the_load():
    # 1.0 × 1.1 × 2 / 0.5 = 4.4 → 5
    assert planning.required_replicas([[1.0]], 0.5, 0.1, 2.0)[0, 0] == 5


def test_zero_capacity_is_refused():
    with pytest.raises(PlanningError, match="per-replica capacity"):
        planning.required_replicas([[1.0]], 0.0)


# --- hand-computed schedules ------------------------------------------------------


def test_lead_raises_early_and_hold_keeps_it():
    # 5-minute steps; need 1 everywhere except 4 at step 5.
    load = [1, 1, 1, 1, 1, 4, 1, 1, 1, 1, 1, 1]
    s = plan1(load, lead="10m", hold="10m")  # lead 2 steps, hold 2 steps
    assert s.floor[0].tolist() == [1, 1, 1, 4, 4, 4, 4, 4, 1, 1, 1, 1]
    ch = s.changes
    assert ch.index.tolist() == [3, 8]
    assert ch.old.tolist() == [1, 4] and ch.new.tolist() == [4, 1]
    assert ch.cause_index.tolist() == [5, -1]  # the rise is caused by the peak at step 5


def test_partial_steps_of_lead_round_up():
    # 7 minutes of lead on a 5-minute grid must still cover the sample 2 steps ahead.
    assert planning.window_steps(pd.Timedelta("7m"), STEP) == 2
    assert planning.window_steps(pd.Timedelta("10m"), STEP) == 2
    assert planning.window_steps(pd.Timedelta("0s"), STEP) == 0
    s = plan1([1, 1, 1, 3, 1], lead="7m")
    assert s.floor[0].tolist() == [1, 3, 3, 3, 1]


def test_clamps_to_lower_and_ceiling():
    s = plan1([0.1, 9, 30, 2], lower=2, ceiling=10)
    assert s.floor[0].tolist() == [2, 9, 10, 2]


def test_lower_bound_wins_over_a_lower_ceiling():
    s = plan1([1, 1], lower=5, ceiling=3)
    assert s.floor[0].tolist() == [5, 5]


def test_overlapping_events_take_the_largest_factor():
    times = pd.date_range(T0, periods=6, freq=STEP)
    ev = [
        (T0 + STEP, T0 + 4 * STEP, 1.5),
        (T0 + 2 * STEP, T0 + 3 * STEP, 3.0),
        (T0 + 3 * STEP, T0 + 5 * STEP, 0.5),
    ]
    f = planning.event_factors(times, [ev, []])
    # Half-open windows: step 3 is in [1,4) and [3,5) → 1.5; step 4 only in [3,5).
    assert f[0].tolist() == [1.0, 1.5, 3.0, 1.5, 0.5, 1.0]
    assert f[1].tolist() == [1.0] * 6
    s = plan1([2, 2, 2, 2, 2, 2], factor=f[:1])
    assert s.floor[0].tolist() == [2, 3, 6, 3, 1, 2]


def test_coverage_error_names_the_end_and_the_lead():
    s = plan1([1] * 12, lead="15m")  # covered: first 9 steps
    assert s.floor_at(T0 + 8 * STEP)[0] == 1
    with pytest.raises(PlanningError, match=r"forecast ends at 2026-12-01T00:55:00Z, before now"):
        s.check_covers(T0 + 9 * STEP, [pd.Timedelta("15m")])
    with pytest.raises(PlanningError, match="after now"):
        s.check_covers(T0 - STEP)


def test_next_change_after_an_instant():
    s = plan1([1, 1, 1, 1, 1, 4, 1, 1, 1, 1, 1, 1], lead="10m", hold="10m")
    assert s.next_change(0, T0) == (T0 + 3 * STEP, 1, 4)
    assert s.next_change(0, T0 + 3 * STEP) == (T0 + 8 * STEP, 4, 1)
    assert s.next_change(0, T0 + 8 * STEP) is None


def test_many_workloads_match_one_at_a_time():
    rng = np.random.default_rng(3)
    load = rng.gamma(2.0, 2.0, (7, 50))
    leads = [pd.Timedelta(f"{5 * k}m") for k in (0, 1, 2, 2, 3, 1, 0)]
    holds = [pd.Timedelta(f"{5 * k}m") for k in (1, 1, 0, 2, 3, 1, 4)]
    cap = rng.uniform(0.5, 2.0, 7)
    lower = np.array([1, 2, 1, 3, 1, 1, 2])
    s = planning.plan(
        T0,
        STEP,
        load,
        per_replica=cap,
        headroom=0.1,
        lead=leads,
        hold=holds,
        lower=lower,
        ceiling=12,
    )
    for w in range(7):
        one = planning.plan(
            T0,
            STEP,
            load[w : w + 1],
            per_replica=cap[w],
            headroom=0.1,
            lead=leads[w],
            hold=holds[w],
            lower=int(lower[w]),
            ceiling=12,
        )
        assert np.array_equal(s.floor[w], one.floor[0])


# --- properties -------------------------------------------------------------------

loads = st.lists(st.floats(0, 50, allow_nan=False), min_size=1, max_size=40)
steps = st.integers(0, 6)


@settings(max_examples=150, deadline=None)
@given(loads, steps, steps, st.integers(1, 5), st.integers(0, 30))
def test_floor_within_bounds_and_covers_the_lead_window(load, lead, hold, lower, extra):
    ceiling = lower + extra
    s = plan1(load, lead=STEP * lead, hold=STEP * hold, lower=lower, ceiling=ceiling)
    f, r = s.floor[0], s.required[0]
    assert np.all(f >= lower) and np.all(f <= max(ceiling, lower))
    n = len(load)
    for t in range(n):
        window = r[max(0, t - hold) : min(n, t + lead + 1)]
        expect = min(max(int(window.max()), lower), ceiling)
        assert f[t] == max(expect, lower)
        # The floor at t covers r(s) for every s in [t, t + lead] (up to the ceiling).
        assert np.all(f[t] >= np.minimum(r[t : t + lead + 1], ceiling))


@settings(max_examples=100, deadline=None)
@given(loads, steps, steps, st.floats(0, 1), st.floats(0, 1))
def test_floor_never_decreases_with_more_headroom_lead_or_hold(load, lead, hold, h1, h2):
    lo, hi = sorted((h1, h2))
    a = plan1(load, headroom=lo, lead=STEP * lead, hold=STEP * hold).floor[0]
    assert np.all(plan1(load, headroom=hi, lead=STEP * lead, hold=STEP * hold).floor[0] >= a)
    assert np.all(plan1(load, headroom=lo, lead=STEP * (lead + 1), hold=STEP * hold).floor[0] >= a)
    assert np.all(plan1(load, headroom=lo, lead=STEP * lead, hold=STEP * (hold + 1)).floor[0] >= a)


@settings(max_examples=100, deadline=None)
@given(loads, steps, steps, st.integers(1, 10))
def test_shifting_the_forecast_shifts_the_schedule(load, lead, hold, k):
    # Pad with zeros so nothing falls off the edges, then shift by k steps.
    base = np.array(load + [0.0] * 12)
    shifted = np.concatenate([np.zeros(k), base])
    a = plan1(base, lead=STEP * lead, hold=STEP * hold).floor[0]
    b = plan1(shifted, lead=STEP * lead, hold=STEP * hold).floor[0]
    assert np.array_equal(b[k:], a)


def test_sliding_max_against_a_plain_loop():
    rng = np.random.default_rng(1)
    for _ in range(200):
        a = rng.integers(0, 20, (3, int(rng.integers(1, 30))))
        b, c = int(rng.integers(0, 7)), int(rng.integers(0, 7))
        exp = [[a[w, max(0, i - b) : i + c + 1].max() for i in range(a.shape[1])] for w in range(3)]
        assert planning.sliding_max(a, b, c).tolist() == exp


def test_cover_intervals_is_the_max_of_the_straight_line_over_each_interval():
    # Reference: numpy.interp on a 100× denser grid, its maximum over each interval.
    rng = np.random.default_rng(7)
    pts = rng.uniform(0, 10, size=(3, 6))
    fine = planning.refine(pts, pd.Timedelta("5min"), pd.Timedelta("1min"))[:, :26]
    got = planning.cover_intervals(fine)
    x = np.arange(6) * 5.0
    for w in range(3):
        dense_t = np.linspace(0, 25, 2501)
        dense = np.interp(dense_t, x, pts[w])
        for i in range(25):
            inside = (dense_t >= i) & (dense_t <= i + 1)
            assert got[w, i] == pytest.approx(dense[inside].max())
        assert got[w, 25] == pytest.approx(pts[w, 5])


@pytest.mark.parametrize(
    ("step", "n", "want"),
    [
        ("5min", 288, "1min"),  # the usual day-ahead forecast: read each minute
        ("30s", 100, "30s"),  # finer than a minute already: as it is
        ("90s", 100, "90s"),  # not a whole number of minutes: as it is
        ("1h", 100_000, "30min"),  # 6M one-minute points: the finest divisor that fits
        ("1h", 3_000, "1min"),  # 180 000 points fit
    ],
)
def test_plan_resolution_is_a_divisor_of_the_step_within_the_point_bound(step, n, want):
    got = planning.plan_resolution(pd.Timedelta(step), n)
    assert got == pd.Timedelta(want)
    k = pd.Timedelta(step) / got
    assert k == int(k)  # every planned instant is a real instant of both grids
    assert planning.refined_points(n, pd.Timedelta(step), got) <= planning.MAX_PLAN_POINTS
