"""When a policy wakes next (controller/schedule.py) and the HPA as the watch shows it
(kube/hpa.py ``hpa_from_body``). Pure: ``now`` is the observation's."""

from __future__ import annotations

from dataclasses import replace

import pandas as pd
import pytest
from test_reconcile import NOW, forecast, observed, policy

from floorcast.controller.decide import decide
from floorcast.controller.schedule import MARGIN, Periods, next_wake, resync_wait
from floorcast.controller.state import ForecastState
from floorcast.kube.hpa import fingerprint, hpa_from_body

P = Periods(resync=3600, observe=30, unwatched=45)


def test_a_policy_wakes_at_its_next_planned_change() -> None:
    obs = observed()  # peak in 10 min, lead 15 min: the floor is raised now, lowered later
    d = decide(obs)
    at = pd.Timestamp(d.status["nextChange"]["at"])
    assert at > NOW
    assert next_wake(obs, d, P) == pytest.approx((at + MARGIN - NOW).total_seconds())
    # Woken then, the floor has changed: the plan's instant is a real change.
    later = decide(replace(obs, now=at, status=d.status))
    assert later.floor != d.floor


def test_without_a_change_ahead_the_resync_or_the_forecast_going_stale_wakes_it() -> None:
    obs = observed(fc=ForecastState(series=forecast(peak_in=None, generated=NOW)))
    d = decide(obs)
    assert "nextChange" not in d.status
    # maxAge 6h (default) is after the 1-hour resync; the forecast ends after 1 h
    # (start 1 h ago, 2 h long): it stops covering now + leadTime 15 min before its end.
    assert next_wake(obs, d, replace(P, resync=600)) == pytest.approx(
        resync_wait(600, ("ns", "p"), NOW))
    short = replace(obs, now=NOW + pd.Timedelta("30m"))
    stops = obs.forecast.series.end - pd.Timedelta("15m")  # end - leadTime
    assert next_wake(short, decide(short), P) == pytest.approx(
        (stops + MARGIN - short.now).total_seconds())
    assert decide(replace(short, now=stops + MARGIN)).status["conditions"][0]["status"] == "False"
    old = replace(obs, forecast=ForecastState(series=forecast(
        peak_in=None, generated=NOW - pd.Timedelta("6h") + pd.Timedelta("90s"))))  # fmt: skip
    assert next_wake(old, decide(old), P) == pytest.approx(91)


def test_live_correction_and_unwatched_forecasts_wake_it_on_their_periods() -> None:
    live = observed(policy(liveCorrection={"enabled": True}),
                    fc=ForecastState(series=forecast(peak_in=None)))  # fmt: skip
    assert next_wake(live, decide(live), P) == 30
    note = observed(fc=ForecastState(series=forecast(peak_in=None), note="not labelled"))
    assert next_wake(note, decide(note), P) == 45


def test_resyncs_of_a_start_up_burst_arrive_at_a_steady_rate_from_the_first_cycle() -> None:
    # 10,000 policies first reconciled within 87 s (the start-up measured at 10,000 by
    # tests/perf/bench_operator.py), resync period 600 s.
    start = pd.Timestamp("2026-03-02T08:00:00Z")
    n, period = 10_000, 600.0
    firsts = [start + pd.Timedelta(seconds=87 * i / n) for i in range(n)]
    keys = [("bench", f"w{i:05d}") for i in range(n)]
    waits = [resync_wait(period, k, t) for k, t in zip(keys, firsts, strict=True)]
    assert min(waits) >= period / 2 and max(waits) < 1.5 * period
    due = pd.Series([(t - start).total_seconds() + w for t, w in zip(firsts, waits,
                                                                       strict=True)])  # fmt: skip
    # Between the first slot that every policy is past (t0 + 87 + 300) and the last
    # first resync (t0 + 900) each minute holds about n / period × 60 = 1000 resyncs.
    steady = due[(due >= 420) & (due < 840)]  # seven whole minutes
    per_minute = steady.groupby((steady // 60).astype(int)).size()
    assert per_minute.max() <= 1.2 * n / period * 60, per_minute
    assert per_minute.min() >= 0.8 * n / period * 60, per_minute


def test_a_resync_slot_recurs_every_period_and_is_stable_per_policy() -> None:
    key, period = ("shop", "checkout"), 600.0
    at = NOW + pd.Timedelta(seconds=resync_wait(period, key, NOW))
    # Reconciled in its slot: the next resync is exactly one period later.
    assert resync_wait(period, key, at) == pytest.approx(period)
    assert resync_wait(period, key, NOW) == resync_wait(period, key, NOW)
    # Woken by an input change 10 s before its slot: that slot is skipped.
    early = at - pd.Timedelta(seconds=10)
    assert resync_wait(period, key, early) == pytest.approx(period + 10)


# The shape of an autoscaling/v2 HPA as the API server serves it (Kubernetes API
# reference, HorizontalPodAutoscaler v2: spec.metrics[].resource.target.averageUtilization,
# status.currentMetrics[].resource.current.averageUtilization).
HPA = {
    "apiVersion": "autoscaling/v2", "kind": "HorizontalPodAutoscaler",
    "metadata": {"name": "web", "namespace": "shop", "resourceVersion": "77",
                 "annotations": {"floorcast.dev/baseline": "2", "other": "x"}},
    "spec": {"scaleTargetRef": {"apiVersion": "apps/v1", "kind": "Deployment", "name": "web"},
             "minReplicas": 3, "maxReplicas": 20,
             "metrics": [{"type": "Resource", "resource": {"name": "cpu", "target": {
                 "type": "Utilization", "averageUtilization": 70}}}]},
    "status": {"currentReplicas": 4, "desiredReplicas": 5, "lastScaleTime": "2026-03-02T11:00:00Z",
               "currentMetrics": [{"type": "Resource", "resource": {"name": "cpu", "current": {
                   "averageUtilization": 85, "averageValue": "850m"}}}]},
}  # fmt: skip


def test_hpa_from_a_watch_event_body() -> None:
    h = hpa_from_body(HPA)
    assert (h.min_replicas, h.max_replicas, h.resource_version) == (3, 20, "77")
    assert h.cpu_target_utilization == 70 and h.cpu_current_utilization == 85
    assert h.current_replicas == 4 and h.scale_target == ("apps/v1", "Deployment", "web")
    assert h.last_scale_time == pd.Timestamp("2026-03-02T11:00:00Z")
    assert h.annotations["floorcast.dev/baseline"] == "2"


def test_hpa_without_min_replicas_reads_the_api_default_and_odd_shapes_read_as_no_value() -> None:
    # minReplicas defaults to 1 (Kubernetes API reference, HorizontalPodAutoscalerSpec).
    spec = {k: v for k, v in HPA["spec"].items() if k != "minReplicas"}
    assert hpa_from_body({**HPA, "spec": spec}).min_replicas == 1
    odd = {"metadata": None, "spec": {"metrics": [None, {"type": "Resource", "resource": 3}],
                                      "maxReplicas": "many"},
           "status": {"currentMetrics": "x", "lastScaleTime": "not a time"}}  # fmt: skip
    h = hpa_from_body(odd)
    assert h.cpu_target_utilization is None and h.max_replicas == 1
    assert h.last_scale_time is None and h.scale_target is None


def test_the_fingerprint_ignores_status_but_not_spec_or_our_annotations() -> None:
    base = fingerprint(hpa_from_body(HPA))
    status = {**HPA["status"], "currentReplicas": 9}
    assert fingerprint(hpa_from_body({**HPA, "status": status})) == base
    assert fingerprint(hpa_from_body({**HPA, "spec": {**HPA["spec"], "minReplicas": 5}})) != base
    meta = {**HPA["metadata"], "annotations": {"floorcast.dev/baseline": "3"}}
    assert fingerprint(hpa_from_body({**HPA, "metadata": meta})) != base
    other = {**HPA["metadata"], "annotations": {**HPA["metadata"]["annotations"], "o": "y"}}
    assert fingerprint(hpa_from_body({**HPA, "metadata": other})) == base
