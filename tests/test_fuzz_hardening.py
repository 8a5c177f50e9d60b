"""Issue #14, item 9: a fuzz suite over everything a tenant controls.

History/forecast text, policy documents, the planner and the reconcile decision are
fed generated input (hypothesis). Each test prints how many inputs it tried and
asserts: no exception but the documented "bad input" one (``InputError``), and no
floor below the policy's lower bound or above its ceiling (the floor rule of
docs/policy.md: clamp(max need, lower, ceiling), lower winning over the ceiling).

Bounded in time for CI: ``FLOORCAST_FUZZ_EXAMPLES`` (default 150 per target) sets the
number of inputs; with the default the whole file takes a few seconds. Raise it for a
longer local run, e.g. ``FLOORCAST_FUZZ_EXAMPLES=5000 pytest tests/test_fuzz_hardening.py -s``.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from floorcast.controller.failsafe import decide_safely
from floorcast.controller.state import (
    ANN_BASELINE,
    ANN_FLOOR,
    ANN_POLICY,
    ForecastState,
    HpaState,
    Observed,
)
from floorcast.core import planning
from floorcast.core.series import Series
from floorcast.core.series_text import parse_forecast, parse_history
from floorcast.errors import InputError
from floorcast.plans import bounds_for
from floorcast.policy import MAX_REPLICAS, PolicyError, parse_policy

EXAMPLES = int(os.environ.get("FLOORCAST_FUZZ_EXAMPLES", "150"))
FUZZ = settings(max_examples=EXAMPLES, deadline=None, derandomize=True,
                suppress_health_check=list(HealthCheck))  # fmt: skip
NOW = pd.Timestamp("2026-03-02T12:00:00Z")


def run_counted(name: str, test: Callable[[], None], tried: list[Any]) -> None:
    test()
    print(f"fuzz {name}: {len(tried)} inputs tried")
    assert len(tried) >= min(EXAMPLES, 20)


# ------------------------------------------------------------------ text parsing

JSONISH = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=12),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(
        st.sampled_from(["t", "value", "lower", "upper", "step", "points", "unit",
                         "generated", "meta", "x"]), inner, max_size=5),
    max_leaves=20,
)  # fmt: skip
TIMES = st.one_of(
    st.sampled_from(["2026-03-02T12:00:00Z", "2026-03-02T12:05:00Z", "2026-03-02 12:10:00+01:00",
                     "2026-03-02T12:00:00", "9999-12-31T23:59:59Z", "0001-01-01T00:00:00Z",
                     "2026-02-30T00:00:00Z", "", "x"]),
    st.datetimes(min_value=pd.Timestamp("1900-01-01").to_pydatetime(),
                 max_value=pd.Timestamp("2200-01-01").to_pydatetime()).map(
        lambda d: d.strftime("%Y-%m-%dT%H:%M:%SZ")),
)  # fmt: skip
CELLS = st.one_of(st.floats().map(repr), st.integers().map(str), st.text(max_size=6),
                  st.sampled_from(["1e400", "-1", "nan", "", '"1"', "9" * 400]))  # fmt: skip


@st.composite
def texts(draw: Any) -> str:
    kind = draw(st.sampled_from(["csv", "json-points", "json-any", "noise", "nested"]))
    if kind == "csv":
        header = draw(st.sampled_from(["timestamp,value", "timestamp,value,lower,upper",
                                       "value,timestamp", "timestamp"]))  # fmt: skip
        width = header.count(",") + 1
        rows = draw(st.lists(st.tuples(TIMES, st.lists(CELLS, min_size=width - 1,
                                                       max_size=width)), max_size=8))
        return header + "\n" + "\n".join(",".join([t, *c]) for t, c in rows)
    if kind == "json-points":
        pts = draw(st.lists(st.fixed_dictionaries(
            {"t": TIMES, "value": st.floats() | st.integers() | st.none()},
            optional={"lower": st.floats(), "upper": st.floats()}), max_size=8))
        doc = {"points": pts, "step": draw(st.sampled_from(
            ["5m", "1ms", "99999999999h", "0s", "1d", "367d", 5, None]))}
        if draw(st.booleans()):
            doc["generated"] = draw(TIMES)
        return json.dumps(doc)
    if kind == "json-any":
        return json.dumps(draw(JSONISH))
    if kind == "nested":
        depth = draw(st.integers(min_value=1, max_value=3000))
        return '{"meta": ' + "[" * depth + "]" * depth + ', "points": []}'
    return draw(st.text(max_size=200))


def test_history_and_forecast_parsing_raise_only_input_errors() -> None:
    tried: list[str] = []

    @FUZZ
    @given(texts(), st.sampled_from([None, "csv", "json"]))
    def check(text: str, fmt: str | None) -> None:
        tried.append(text)
        for parse in (parse_forecast, parse_history):
            try:
                s = parse(text, source="fuzz", fmt=fmt, max_bytes=1 << 20)
            except InputError:
                continue
            assert len(s) >= 1 and np.all(np.isfinite(s.values)) and np.all(s.values >= 0)

    run_counted("series text", check, tried)


# ------------------------------------------------------------------ policy parsing

DURATIONS = st.one_of(
    st.from_regex(r"^([0-9]{1,20}(\.[0-9]{1,20})?(ms|s|m|h|d))+$", fullmatch=True),
    st.sampled_from(["168h", "168h1ms", "99999999999999h", "0s", "-5m", "1d"]), JSONISH,
)  # fmt: skip
NUMBERS = st.one_of(st.floats(), st.integers(min_value=-(10**400), max_value=10**400),
                    st.sampled_from([0, 10, 1000, 1e12, 2**31, "1", True, None]))  # fmt: skip


@st.composite
def policy_docs(draw: Any) -> dict[str, Any]:
    spec: dict[str, Any] = {
        "targetRef": draw(st.sampled_from([{"name": "web"}, {"name": "Web"}, {}, "web"])),
        "forecast": draw(st.sampled_from([
            {"configMapRef": {"name": "fc", "key": "f.json"}},
            {"url": "https://f.example/x"}, {"url": "ftp://x"}, {}])),
        "capacity": {"perReplica": draw(NUMBERS)} if draw(st.booleans()) else {"fromHPA": True},
    }  # fmt: skip
    for f in ("leadTime", "holdTime"):
        if draw(st.booleans()):
            spec[f] = draw(DURATIONS)
    for f in ("headroom", "minReplicas", "maxReplicas"):
        if draw(st.booleans()):
            spec[f] = draw(NUMBERS)
    if draw(st.booleans()):
        spec["plannedEvents"] = [{"name": "sale", "start": draw(TIMES), "end": draw(TIMES),
                                  "factor": draw(NUMBERS)}]  # fmt: skip
    if draw(st.booleans()):
        spec[draw(st.sampled_from(["mode", "useUpperBound", "extra"]))] = draw(JSONISH)
    return {"apiVersion": "floorcast.dev/v1alpha1", "kind": "ForecastScalingPolicy",
            "metadata": {"name": "p", "namespace": "ns"}, "spec": spec}  # fmt: skip


def test_policy_parsing_raises_only_policy_errors_and_bounds_hold() -> None:
    tried: list[Any] = []

    @FUZZ
    @given(policy_docs())
    def check(doc: dict[str, Any]) -> None:
        tried.append(doc)
        try:
            p = parse_policy(doc, source="fuzz")
        except PolicyError:
            return
        s = p.spec
        assert pd.Timedelta(0) < pd.Timedelta(s.lead_time) <= pd.Timedelta("168h")
        assert pd.Timedelta(0) <= pd.Timedelta(s.hold_time) <= pd.Timedelta("168h")
        assert 0 <= s.headroom <= 10
        assert all(0 < e.factor <= 1000 for e in s.planned_events)
        for r in (s.min_replicas, s.max_replicas):
            assert r is None or 1 <= r <= MAX_REPLICAS

    run_counted("policy", check, tried)


# ------------------------------------------------------------------ planning

LOADS = st.lists(st.one_of(st.floats(min_value=0, max_value=1e308),
                           st.sampled_from([0.0, 1.5, 6.5, 1e300, 1.7e308])),
                 min_size=1, max_size=60)  # fmt: skip


def test_planning_floor_stays_between_lower_and_ceiling() -> None:
    tried: list[Any] = []

    @FUZZ
    @given(LOADS, st.floats(min_value=1e-300, max_value=1e12), st.floats(0, 10),
           st.floats(min_value=1e-9, max_value=1000), st.integers(0, 10**6),
           st.integers(0, 10**6), st.integers(1, MAX_REPLICAS), st.integers(1, MAX_REPLICAS),
           st.sampled_from(["1ms", "1s", "5m", "1h"]))  # fmt: skip
    def check(load, per, head, factor, lead_s, hold_s, lower, ceiling, step) -> None:
        tried.append(load)
        s = planning.plan(NOW, pd.Timedelta(step), np.array([load]), per_replica=per,
                          headroom=head, lead=pd.Timedelta(seconds=lead_s),
                          hold=pd.Timedelta(seconds=hold_s), lower=lower, ceiling=ceiling,
                          event_factor=factor)  # fmt: skip
        top = max(ceiling, lower)
        assert s.floor.min() >= min(lower, top) and s.floor.max() <= top
        assert s.floor.shape == (1, len(load)) and s.required.min() >= 0

    run_counted("planning", check, tried)


# ------------------------------------------------------------------ the decision

ANN_VALUES = st.one_of(st.integers(-3, 40).map(str), st.sampled_from(["", "x", "1e9", "9" * 50]))


@st.composite
def observations(draw: Any) -> Observed:
    spec: dict[str, Any] = {
        "targetRef": {"name": "web"},
        "forecast": {"configMapRef": {"name": "fc", "key": "f.json"}},
        "capacity": {"perReplica": draw(st.floats(min_value=1e-3, max_value=1e3))},
        "leadTime": draw(st.sampled_from(["1m", "15m", "168h"])),
        "holdTime": draw(st.sampled_from(["0s", "10m", "168h"])),
        "headroom": draw(st.floats(0, 10)),
        "mode": draw(st.sampled_from(["Enforce", "DryRun"])),
    }
    if draw(st.booleans()):
        spec["minReplicas"] = draw(st.integers(1, 50))
    if draw(st.booleans()):
        spec["maxReplicas"] = draw(st.integers(spec.get("minReplicas", 1), 60))
    if draw(st.booleans()):
        spec["plannedEvents"] = [{"name": "e", "start": "2026-03-02T11:00:00Z",
                                  "end": "2026-03-02T13:00:00Z",
                                  "factor": draw(st.floats(min_value=1e-3, max_value=1000))}]
    policy = parse_policy({"apiVersion": "floorcast.dev/v1alpha1",
                           "kind": "ForecastScalingPolicy",
                           "metadata": {"name": "p", "namespace": "ns"}, "spec": spec})
    ann = draw(st.dictionaries(st.sampled_from([ANN_BASELINE, ANN_FLOOR, ANN_POLICY]),
                               st.one_of(ANN_VALUES, st.sampled_from(["p", "other"])),
                               max_size=3))  # fmt: skip
    lo = draw(st.integers(1, 40))
    hpa = HpaState(True, lo, draw(st.integers(lo, 60)), ann, resource_version="1")
    n = draw(st.integers(1, 40))
    step = pd.Timedelta(draw(st.sampled_from(["1m", "5m"])))
    values = np.array(draw(st.lists(st.floats(0, 1e6), min_size=n, max_size=n)))
    start = NOW - draw(st.integers(0, n)) * step
    series = Series(start=start, step=step, values=values, source="fuzz",
                    generated=NOW - pd.Timedelta(minutes=draw(st.integers(-60, 600))))
    forecast = draw(st.sampled_from([ForecastState(series=series),
                                     ForecastState(reason="ForecastMissing", message="gone")]))
    status = draw(st.one_of(st.just({}), st.fixed_dictionaries(
        {"baseline": st.integers(-1, 40), "floor": st.integers(-1, 60)})))
    return Observed(name="p", namespace="ns", policy=policy, hpa=hpa, forecast=forecast,
                    now=NOW, status=status, generation=1,
                    operator_dry_run=draw(st.booleans()), deleting=draw(st.booleans()))


def test_decision_never_raises_and_keeps_the_floor_in_bounds() -> None:
    tried: list[Any] = []

    @FUZZ
    @given(observations())
    def check(obs: Observed) -> None:
        tried.append(obs)
        d = decide_safely(obs)
        assert d.log
        if d.hpa_patch is None:
            return
        m = d.hpa_patch.min_replicas
        assert 1 <= m <= MAX_REPLICAS
        assert obs.policy is not None
        baseline = d.baseline
        if baseline is None:  # a deletion: only ever back to a baseline, never a raise
            assert not any(v for v in d.hpa_patch.annotations.values())
            return
        b = bounds_for(obs.policy.spec, baseline=baseline, hpa_max=obs.hpa.max_replicas)
        assert b.lower <= m <= b.ceiling or m == baseline, (m, b)
        if obs.operator_dry_run or obs.policy.spec.mode == "DryRun" or obs.deleting:
            assert m == baseline  # dry-run and delete only ever restore

    run_counted("decision", check, tried)
