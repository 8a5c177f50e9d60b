"""The accuracy guard in the back-test (replay_guard): it uses only what was observed up
to each instant, it trips and recovers when the forecast stops and starts describing
the load again, and it is the operator's guard (controller/accuracy.py) fed the same
observations."""

from __future__ import annotations

from dataclasses import replace
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest
from test_backtest_live import DAY, START, STEP, _history, _setup, _spec

from floorcast import plans, replay, replay_guard
from floorcast.cli.backtest import parse_sweep
from floorcast.controller import accuracy
from floorcast.controller.live import Outcome
from floorcast.controller.state import HpaState, Observed
from floorcast.core import backtest as bt
from floorcast.core import planning
from floorcast.errors import InputError
from floorcast.policy import PlannedEvent
from floorcast.policy_guard import AccuracyGuard
from floorcast.replay_floors import Knobs

WINDOW, RECOVER = timedelta(hours=1), timedelta(minutes=30)
H = pd.Timedelta(hours=1)


def _guarded(**kw):
    g = AccuracyGuard(enabled=True, window=WINDOW, recover_after=RECOVER, **kw)
    return replace(_spec(False), accuracy_guard=g)


def _departing(factor: float = 2.0) -> tuple:
    """The live tests' history (a seasonal-naive forecast from the day before is right
    on the last day) with the load × ``factor`` from 06:00 to 12:00 of the last day."""
    h = _history(1.0)
    v = np.asarray(h.values).copy()
    a, b = (int((7 * DAY + x * H) / STEP) for x in (6, 12))
    v[a:b] *= factor
    return replace(h, values=v), 7 * DAY + 6 * H, 7 * DAY + 12 * H


def _syncs(r: replay.Result) -> pd.DatetimeIndex:
    return pd.DatetimeIndex(r.start + np.arange(len(r.demand)) * r.sync)


@pytest.fixture(scope="module")
def departing() -> tuple:
    """The departing history replayed with the guard (default thresholds) and without."""
    hist, t_up, t_back = _departing(2.0)
    return (hist, t_up, t_back, replay.run(_guarded(), hist, _setup()),
            replay.run(_spec(False), hist, _setup()))  # fmt: skip


def test_the_guard_sees_no_load_after_each_instant():
    """Two histories equal until s and different after it (three times the load): the
    guard's state, figures and floors before s are the same, so nothing after s leaked
    in — and after s the tripled load does trip it, so the test could fail."""
    s = START + 7 * DAY + 9 * H
    a = _history(1.0)
    later = np.asarray(a.values).copy()
    later[int((s - START) / STEP):] *= 3.0
    b = replace(a, values=later)
    ra, rb = replay.run(_guarded(), a, _setup()), replay.run(_guarded(), b, _setup())
    # The straight line between samples reaches back one step before s.
    before = _syncs(ra) < s - STEP
    assert before.sum() > 1000
    for name in ("tripped", "judged", "error", "exceedance", "floors"):
        np.testing.assert_array_equal(getattr(ra.guard, name)[0][before],
                                      getattr(rb.guard, name)[0][before])  # fmt: skip
    row = ra.row("floorcast")
    np.testing.assert_array_equal(ra.minimum[row][before], rb.minimum[row][before])
    # A load that matches the forecast is judged and never trips; the tripled one does.
    assert not ra.guard.tripped.any() and ra.guard.judged.mean() > 0.9
    assert rb.guard.tripped[0][~before].any()


def test_a_departing_load_trips_to_the_baseline_and_recovers_after_recover_after(departing):
    _, t_up, t_back, on, off = departing
    t = _syncs(on) - START
    trip = on.guard.tripped[0]
    edges = np.flatnonzero(np.diff(trip.astype(int)))
    assert len(edges) == 2, t[edges]  # one trip, one recovery
    tripped_at, recovered_at = t[edges[0] + 1], t[edges[1] + 1]
    # Doubled load is above the floor's sized load (headroom 0, value) all the time, so
    # the exceedance passes 0.5 after about half the window (plus the 5 min of
    # settling after the HPA scales): common practice, no source — the rule itself.
    assert t_up + 0.4 * WINDOW <= tripped_at <= t_up + WINDOW
    # Back on the forecast the exceedance falls under 0.5 after about half the window,
    # then the figures must stay good for recoverAfter.
    assert t_back + RECOVER + 0.4 * WINDOW <= recovered_at <= t_back + RECOVER + WINDOW
    row = on.row("floorcast")
    lower = on.bounds.lower
    planned = off.minimum[off.row("floorcast")]
    assert (planned[trip] > lower).any()  # the fallback changes something
    assert (on.minimum[row][trip] == lower).all()
    np.testing.assert_array_equal(on.minimum[row][~trip], planned[~trip])
    # The scores are those of the guarded floors; without_guard those of the plan.
    assert on.guard.without[0] == off.scores[off.row("floorcast")]
    assert on.scores[row]["replica_hours"] < off.scores[off.row("floorcast")]["replica_hours"]
    s = replay_guard.summary(on.guard, 0, on.sync)
    assert s["trips"] == 1 and s["tripped_share"] == pytest.approx(trip.mean())
    assert s["tripped_minutes"] == pytest.approx(trip.sum() * 0.25)
    assert s["exceedance_p90"] == pytest.approx(1.0)


def test_swept_thresholds_each_replay_their_own_guard(departing):
    """--sweep accuracyGuard.maxExceedance=...: rows with the guard although the policy
    leaves it off; a threshold no figure reaches never trips; a row's result is the one
    a policy with that threshold gives."""
    hist, _, _, alone, _ = departing
    own = Knobs(timedelta(minutes=5), 0.0, timedelta(0), 0.7)
    grid = parse_sweep(("accuracyGuard.maxExceedance=0.5,1", "maxError=0.5"), own)
    assert [(k.max_error, k.max_exceedance) for k in grid] == [(0.5, 0.5), (0.5, 1.0)]
    r = replay.run(_spec(False), hist, _setup(), sweep=grid)
    assert r.guard.rows == (1, 2)  # the policy's own row has no guard
    first, second = (row["accuracy_guard"] for row in r.sweep)
    # The WAPE of doubled load is 0.5, not above it; the exceedance never passes 1.
    assert first["trips"] == 1 and second["trips"] == 0
    assert r.sweep[1]["under_capacity_minutes"] == r.scores[r.row("floorcast")][
        "under_capacity_minutes"]
    np.testing.assert_array_equal(r.guard.tripped[0], alone.guard.tripped[0])
    assert r.sweep[0]["under_capacity_minutes"] == alone.scores[alone.row("floorcast")][
        "under_capacity_minutes"]
    with pytest.raises(InputError, match="maxExceedance"):
        parse_sweep(("accuracyGuard.maxExceedance=1.5",), own)


@pytest.mark.parametrize("action", ["Baseline", "LiveCorrected"])
def test_the_replay_is_the_operators_guard_fed_the_same_observations(action):
    """Every reconcile of the replay, done again by the operator's own code: a plan per
    instant from the forecast in force (plans.plan_policy), the HPA's status carrying
    the observed load, controller.accuracy.apply with its memory carried over. The
    forecast value, sized load, trip state and floor agree at every reconcile; with
    ``LiveCorrected`` the floor stays the corrected one only while there is a factor."""
    step, sync, every = pd.Timedelta("5min"), pd.Timedelta("15s"), pd.Timedelta("5min")
    g = replace(_guarded(max_error=0.3).accuracy_guard, action=action)
    spec = replace(
        _spec(False), accuracy_guard=g, headroom=0.1, use_upper_bound=True,
        planned_events=(PlannedEvent("sale", START + 2 * H, START + 4 * H, 1.5),),
    )  # fmt: skip
    h = int(DAY / step)
    x = np.arange(h) * step / DAY
    point = 3.0 + np.sin(2 * np.pi * x)
    rolling = bt.Rolling(times=pd.DatetimeIndex([START]), step=step, point=point[None],
                         upper=1.2 * point[None], method=("test",), season=np.array([h]),
                         train=[point])  # fmt: skip
    n = int(12 * H / sync)
    t = np.arange(n) * sync / DAY
    demand = np.round((3.0 + np.sin(2 * np.pi * t)) * np.where((t > 0.2) & (t < 0.35), 2, 1), 2)
    scaled = np.zeros((1, n), dtype=bool)
    scaled[0, [400, 1300, 1310]] = True  # the observations within leadTime are skipped
    bounds = plans.bounds_for(spec, baseline=2, hpa_max=60)
    pstep = planning.plan_resolution(step, h)
    current = np.full((1, n), 5)
    # The live correction's factor: there for the first hour of the departure only.
    factor = np.where((t > 0.2) & (t < 0.25), 1.1, np.nan)[None, :]
    grid = [Knobs(spec.lead_time, spec.headroom, spec.hold_time, 1.0)]
    kw = {"demand": demand, "scaled": scaled, "sim_start": START, "sync": sync,
          "plan_step": pstep, "interval": every}  # fmt: skip
    o = replay_guard.observe(spec, rolling, grid, **kw)
    rep = replay_guard.replay(spec, rolling, grid, bounds, current=current, per_replica=1.0,
                              base_target=1.0, factor=factor, **kw)  # fmt: skip
    memory, got = None, []
    for k, i in enumerate(o.ticks):
        now = START + i * sync
        plan = plans.plan_policy(spec, rolling.forecast(0), baseline=2, hpa_max=60, at=now,
                                 per_replica=1.0)  # fmt: skip
        assert o.forecast[0, k] == pytest.approx(plans.point_at(plan), rel=1e-12)
        assert o.sized[0, k] == pytest.approx(accuracy.sized_load(plan), rel=1e-12)
        # The HPA's status: 1 pod at demand × 100 % of a 100 % target, perReplica 1.
        last = np.flatnonzero(scaled[0, : i + 1])
        hpa = HpaState(exists=True, cpu_target_utilization=100, current_replicas=1,
                       cpu_current_utilization=None if i == 0 else round(demand[i - 1] * 100),
                       last_scale_time=START + last[-1] * sync if len(last) else None)  # fmt: skip
        obs = Observed(name="p", namespace="ns", policy=None, hpa=hpa, forecast=None, now=now,
                       guard=memory)  # fmt: skip
        f = None if np.isnan(factor[0, i]) else float(factor[0, i])
        res = accuracy.apply(obs, plan, Outcome(5, f, None, None, ""))
        memory = res.memory
        got.append((res.condition.status is False, res.floor))
    tripped = np.array([g[0] for g in got])
    assert tripped.any() and not tripped.all()  # the comparison covers both states
    np.testing.assert_array_equal(rep.tripped[0, o.ticks], tripped)
    floors = rep.floors[0, o.ticks]
    np.testing.assert_array_equal(floors, [g[1] for g in got])
    kept = tripped & np.isfinite(factor[0, o.ticks])
    assert kept.any() and (tripped & ~kept).any()
    want = np.where(tripped & ~kept if action == "LiveCorrected" else tripped, bounds.lower, 5)
    np.testing.assert_array_equal(floors, want)
