"""The live correction in the reconcile decision (controller/live.py), as a pure
function: the HPA's status in, the corrected floor, status, Event and memory out.

Hand-worked with the floor rule (docs/policy.md): perReplica 1, headroom 0, the flat
load 1.5 and a peak of 6.5 in ten minutes (tests/test_reconcile.py's forecast); the
HPA's target is 50 % CPU, so a pod reporting 50 % carries exactly perReplica.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from kubernetes import client as k8s
from test_reconcile import NOW, forecast, hpa, observed, policy

from floorcast.controller import live
from floorcast.controller.decide import ForecastState, decide
from floorcast.controller.state import LiveMemory
from floorcast.kube.hpa import hpa_from_body

LC = {"enabled": True, "halfLife": "10m", "min": 0.5, "max": 2.0}


def status_hpa(util: int | None, replicas: int = 4, *, error: str | None = None,
               last_scale: pd.Timestamp | None = None, **kw):  # fmt: skip
    return replace(hpa(**kw), cpu_target_utilization=50, cpu_current_utilization=util,
                   cpu_current_error=error, current_replicas=replicas,
                   last_scale_time=last_scale)  # fmt: skip


#: Generated an hour before NOW, so every earlier reconcile may plan on it.
FC = ForecastState(series=forecast(generated=NOW - pd.Timedelta("1h")))


def run(util: int | None, steps: int, *, pol=None, **kw):
    """``steps`` reconciles 30 s apart, carrying the memory like the reconcile adapter."""
    pol = pol or policy(liveCorrection=LC)
    mem, d = None, None
    for i in range(steps):
        now = NOW - (steps - 1 - i) * pd.Timedelta("30s")
        obs = replace(observed(pol, h=status_hpa(util, **kw), fc=FC), now=now, live=mem,
                      status=d.status if d else {})  # fmt: skip
        d = decide(obs)
        mem = d.live_memory
    return d


def test_observed_load_is_utilization_over_target_times_replicas_times_capacity():
    # [HPA doc] "Algorithm details": desiredReplicas = ceil(currentReplicas ×
    # currentMetricValue / desiredMetricValue); the load the pods carry is therefore
    # currentReplicas × current/target replicas' worth of perReplica.
    load, why = live.observed_load(status_hpa(75, 4), 1.0)
    assert why is None and load == pytest.approx(4 * 75 / 50)
    assert live.observed_load(replace(status_hpa(75), cpu_target_utilization=None), 1.0)[0] is None
    assert "no current CPU" in live.observed_load(status_hpa(None), 1.0)[1]


def test_a_busier_day_raises_the_floor_and_says_so():
    # 4 pods at 60 % of a 50 % target carry 4.8 against a forecast of 1.5: ×3.2, clamped
    # to max 2. The peak 6.5 × 2 = 13 needs 13 replicas, capped at the HPA's max 10.
    d = run(60, 30)
    assert d.status["liveCorrection"]["reason"] == "Active"
    assert d.status["liveCorrection"]["factor"] == 2.0 and d.live_factor == 2.0
    assert d.floor == 10 and d.hpa_patch.min_replicas == 10
    raised = next(e for e in d.events if e.reason == "FloorRaised")
    assert "live correction ×2.00, plan 7" in raised.message


def test_before_enough_evidence_the_plan_stands():
    d = run(60, 5)  # 2.5 minutes of a 10 m half-life
    assert d.status["liveCorrection"]["reason"] == "Gathering"
    assert d.status["liveCorrection"]["factor"] == 1.0
    assert d.floor == 7 and d.live_factor is None
    assert d.live_memory is not None and 0 < d.live_memory.weight < 0.5


@pytest.mark.parametrize(("band", "want"), [(3.0, 10), (1.2, 7)])
def test_a_quieter_day_lowers_the_floor_but_not_below_the_value_plan(band, want):
    # Upper band = band × value. Observed a quarter of the forecast: factor clamped to
    # min 0.5. Band 3: the plan needs ceil(3 × 6.5) = 20, corrected ceil(0.5 × 19.5) =
    # 10. Band 1.2: the plan needs ceil(7.8) = 8, corrected ceil(3.9) = 4, but the
    # floor planned on the value, ceil(6.5) = 7, is as low as a correction may go.
    fc = forecast(generated=NOW - pd.Timedelta("1h"))
    fc = replace(fc, lower=np.asarray(fc.values) * 0.5, upper=np.asarray(fc.values) * band)
    pol = policy(liveCorrection=LC)
    mem, d = None, None
    for i in range(30):
        now = NOW - (29 - i) * pd.Timedelta("30s")
        # 2 pods at 9 % of a 50 % target: 0.36, a quarter of the forecast's 1.5.
        h = status_hpa(9, 2, max_replicas=30)
        obs = replace(observed(pol, h=h, fc=ForecastState(series=fc)), now=now, live=mem,
                      status=d.status if d else {})  # fmt: skip
        d = decide(obs)
        mem = d.live_memory
    assert d.live_factor == 0.5
    assert d.floor == want and d.floor >= 2  # and never below the baseline


def test_several_cpu_series_are_named_and_leave_the_plan():
    d = run(60, 30, error="the HPA reports 2 CPU utilization series in status.currentMetrics; "
                          "expected one")  # fmt: skip
    assert d.status["liveCorrection"]["reason"] == "NoObservation"
    assert "2 CPU utilization series" in d.status["liveCorrection"]["message"]
    assert d.floor == 7  # the plan's floor, never lower


def test_readings_right_after_a_scale_are_skipped():
    d = run(60, 30, last_scale=NOW - pd.Timedelta("1m"))  # always within leadTime 15m
    assert d.status["liveCorrection"]["reason"] == "Gathering" and d.floor == 7


def test_disabled_by_default_no_status_no_metric():
    d = decide(observed(policy(), h=status_hpa(60)))
    assert "liveCorrection" not in d.status and d.live_factor is None and d.live_memory is None


def test_a_steady_factor_does_not_rewrite_the_status():
    d = run(60, 40)
    nxt = replace(observed(policy(liveCorrection=LC), h=status_hpa(60, min_replicas=10), fc=FC),
                  now=NOW + pd.Timedelta("30s"), live=d.live_memory, status=d.status)  # fmt: skip
    assert decide(nxt).status["liveCorrection"] == d.status["liveCorrection"]


def test_cpu_current_reads_the_hpa_status():
    def metric(name: str, util: int | None) -> k8s.V2MetricStatus:
        cur = k8s.V2MetricValueStatus(average_utilization=util)
        res = k8s.V2ResourceMetricStatus(name=name, current=cur)
        return k8s.V2MetricStatus(type="Resource", resource=res)

    def h(*ms: k8s.V2MetricStatus) -> k8s.V2HorizontalPodAutoscaler:
        spec = k8s.V2HorizontalPodAutoscalerSpec(
            max_replicas=5, scale_target_ref=k8s.V2CrossVersionObjectReference(kind="D", name="d"))
        status = k8s.V2HorizontalPodAutoscalerStatus(current_metrics=list(ms), desired_replicas=3)
        return k8s.V2HorizontalPodAutoscaler(spec=spec, status=status)

    def _cpu_current(obj: k8s.V2HorizontalPodAutoscaler) -> tuple[int | None, str | None]:
        # The API's JSON, as a GET or a watch event carries it.
        got = hpa_from_body(k8s.ApiClient().sanitize_for_serialization(obj))
        return got.cpu_current_utilization, got.cpu_current_error

    assert _cpu_current(h(metric("memory", 80), metric("cpu", 64))) == (64, None)
    assert _cpu_current(h()) == (None, None)
    util, why = _cpu_current(h(metric("cpu", 64), metric("cpu", 70)))
    assert util is None and "2 CPU utilization series" in why


def test_memory_survives_only_in_the_decision():
    d = run(60, 3)
    assert isinstance(d.live_memory, LiveMemory) and d.live_memory.at == NOW


def test_a_bug_in_the_correction_leaves_the_plan_not_the_baseline(monkeypatch):
    def boom(*a, **k):
        raise RuntimeError("bug")

    monkeypatch.setattr(live, "point_at", boom)
    d = decide(replace(observed(policy(liveCorrection=LC), h=status_hpa(60), fc=FC)))
    assert d.floor == 7 and d.hpa_patch.min_replicas == 7  # the plan, uncorrected
    assert "failed (RuntimeError)" in d.status["liveCorrection"]["message"]
