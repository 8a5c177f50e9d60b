"""The one-line explanation of a floor (floorcast/explain.py; docs/policy.md, "Why this
floor"): its numbers alone reproduce the floor exactly, and on the docs' worked example
it reads what a person computes by hand."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from floorcast import plans
from floorcast.core import correction, planning
from floorcast.core.series import Series
from floorcast.explain import explain
from floorcast.policy import Capacity, ConfigMapRef, ForecastSource, PlannedEvent, PolicySpec

START = pd.Timestamp("2027-01-08T12:00:00Z")
NUM = r"([0-9.e+-]+)"


def _spec(**kw) -> PolicySpec:
    base = dict(target_name="web",
                forecast=ForecastSource(config_map_ref=ConfigMapRef("f", "k"), url=None),
                capacity=Capacity(per_replica=0.5, from_hpa=False),
                lead_time=pd.Timedelta("10m").to_pytimedelta(),
                hold_time=pd.Timedelta("30m").to_pytimedelta(), headroom=0.1)  # fmt: skip
    base.update(kw)
    return PolicySpec(**base)


def _worked_example() -> Series:
    # docs/policy.md, "Worked example": a 5-minute forecast of 0.8, 3.0 at 13:00 and 13:05.
    times = pd.date_range(START, periods=48, freq="5min")
    values = np.where(np.isin(times.strftime("%H:%M"), ["13:00", "13:05"]), 3.0, 0.8)
    return Series(start=START, step=pd.Timedelta("5min"), values=values, unit="cores")


def test_the_worked_example_explains_itself_as_computed_by_hand():
    # By hand (docs/policy.md, worked example): at 12:50 the window [12:20, 13:00]
    # reaches the minute from 12:59, whose load climbs to 3.0:
    # ceil(3.0 × 1.1 / 0.5) = ceil(6.6) = 7.
    at = pd.Timestamp("2027-01-08T12:50:00Z")
    plan = plans.plan_policy(_spec(), _worked_example(), baseline=2, hpa_max=10, at=at)
    e = explain(plan, plan.floor_now)
    assert plan.floor_now == 7
    assert e.text() == ("value 3 cores in the 1m from 2027-01-08T12:59:00Z × (1 + headroom "
                        "0.1) / perReplica 0.5 = 6.6 → 7 replicas → floor 7")  # fmt: skip
    # Off-peak the need is below the baseline, and the line says the bound raised it:
    # ceil(0.8 × 1.1 / 0.5) = ceil(1.76) = 2 ... here the baseline is 3.
    early = plans.plan_policy(_spec(hold_time=pd.Timedelta(0).to_pytimedelta()),
                              _worked_example(), baseline=3, hpa_max=10,
                              at=pd.Timestamp("2027-01-08T12:05:00Z"))  # fmt: skip
    assert explain(early, early.floor_now).text().endswith(
        "= 1.76 → 2 replicas, raised to the lower bound 3 (baseline) → floor 3")
    capped = plans.plan_policy(_spec(max_replicas=5), _worked_example(), baseline=2,
                               hpa_max=10, at=at)  # fmt: skip
    assert explain(capped, capped.floor_now).text().endswith(
        "→ 7 replicas, capped at 5 (policy maxReplicas) → floor 5")


def _redo(text: str) -> tuple[float, int]:
    """The need and the replicas from the line's own numbers, as a person would."""
    m = re.search(rf"(?:value|upper band) {NUM}.*?(?: × event {NUM})? × \(1 \+ headroom "
                  rf"{NUM}\)(?: × live {NUM})? / perReplica {NUM} = {NUM} → (\d+) replicas",
                  text)  # fmt: skip
    assert m, text
    load, event, head, live, cap, _need, req = m.groups()
    redo = float(load) * float(event or 1) * (1 + float(head)) * float(live or 1) / float(cap)
    return redo, int(req)


@settings(max_examples=60, deadline=None)
@given(values=st.lists(st.floats(0, 50), min_size=30, max_size=60),
       band=st.floats(1.0, 1.5), headroom=st.floats(0, 1), cap=st.floats(0.1, 5),
       lead=st.integers(1, 40), hold=st.integers(0, 40), at_step=st.integers(0, 20),
       baseline=st.integers(1, 6), hpa_max=st.integers(1, 40),
       pmax=st.one_of(st.none(), st.integers(1, 30)),
       factor=st.one_of(st.none(), st.floats(0.5, 2.0)), ev=st.floats(0.5, 3))  # fmt: skip
def test_the_lines_numbers_reproduce_the_floor(values, band, headroom, cap, lead, hold, at_step,
                                               baseline, hpa_max, pmax, factor, ev):  # fmt: skip
    step = pd.Timedelta("5min")
    v = np.array(values)
    fc = Series(start=START, step=step, values=v, lower=v / band, upper=v * band)
    event = PlannedEvent("sale", START + 10 * step, START + 14 * step, ev)
    spec = _spec(headroom=headroom, capacity=Capacity(per_replica=cap, from_hpa=False),
                 lead_time=pd.Timedelta(minutes=lead).to_pytimedelta(),
                 hold_time=pd.Timedelta(minutes=hold).to_pytimedelta(), max_replicas=pmax,
                 planned_events=(event,))  # fmt: skip
    at = START + at_step * step + pd.Timedelta(minutes=2)
    plan = plans.plan_policy(spec, fc, baseline=baseline, hpa_max=hpa_max, at=at)
    b = plan.bounds
    if factor is None:  # the plan's own floor
        floor, keep = plan.floor_now, None
    else:  # the live correction's floor (core.correction), keep = the lower bound
        floor = int(correction.corrected_floor(
            np.array([plan.floor_now]), np.array([plans.window_need(plan)]), np.array([factor]),
            keep=np.array([b.lower]), lower=b.lower, ceiling=b.ceiling)[0])  # fmt: skip
        keep = b.lower
    e = explain(plan, floor, live=factor, keep=keep)
    assert e.floor == floor
    # The fields redo the floor exactly: clamp(ceil(need), lower, ceiling), lower wins.
    assert e.required == int(planning.ceil_replicas(np.array([e.need]))[0])
    assert max(min(e.required, b.ceiling), b.lower) == floor
    assert abs(e.need - plans.window_need(plan) * (factor or 1.0)) <= 1e-9 * max(1.0, e.need)
    # And the printed numbers (6 significant digits) redo the need to that precision.
    redo, req = _redo(e.text())
    assert req == e.required and abs(redo - e.need) <= 1e-4 * max(1.0, e.need)
    assert (e.bound is None) == (e.required == floor)
