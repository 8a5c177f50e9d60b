"""floorcast in a living cluster: one time-compressed day of load, two identical
services under it, one with an Enforce policy and one with the HPA alone.

The day (seconds from the trace origin): quiet at 1 core until 120 s, a predictable
peak of 8 cores from 140 s (in the forecast), a surprise to 12 cores from 260 s (not
in the forecast, which stays at 8), back to 1 core from 345 s; the policy is deleted
at 450 s. Pods take ``LIVING.pod_ready_delay`` (40 s) from start to Ready, so the
HPA alone must saturate at the ramp while floorcast's Pods are Ready before it.

One module-scoped run records everything (HPA, Ready Pods, the load driver's
samples); each test asserts one property of it, on Ready Pods and HPA status.
"""

from __future__ import annotations

import json
import math
import time

import numpy as np
import pytest

from e2e.conftest import LIVING, LIVING_HPA_SYNC
from e2e.fidelity import Agreement, model_run, on_grid, real_minutes
from e2e.living_env import (
    HPA_MAX,
    HPA_MIN,
    HPA_TARGET,
    POD_CPU,
    SCALE_DOWN_WINDOW,
    Recorder,
    create_service,
    forecast_for,
    living_env,
    ready_pods,
    wait_until,
)
from e2e.load import LoadDriver, ramp
from e2e.operator_env import policy_body

#: The day takes about 9 minutes of wall clock plus set-up, all in the module fixture.
pytestmark = pytest.mark.timeout(1200)

BASE, PEAK, SURPRISE = 1.0, 8.0, 12.0
PEAK_AT, SURPRISE_AT, DOWN_AT, DELETE_AT, END = 140, 260, 345, 450, 520
DAY = ramp([(0, BASE), (120, BASE), (PEAK_AT, PEAK), (240, PEAK), (SURPRISE_AT, SURPRISE),
            (330, SURPRISE), (DOWN_AT, BASE)])  # fmt: skip
FORECAST = ramp([(0, BASE), (120, BASE), (PEAK_AT, PEAK), (330, PEAK), (DOWN_AT, BASE)])
PER_REPLICA = POD_CPU * HPA_TARGET / 100  # cores one pod carries at the HPA target
LEAD, HOLD, HEADROOM = "100s", "60s", 0.1


@pytest.fixture(scope="module")
def day(living_plane, tmp_path_factory):
    """Run the day once; yield the recorder, both drivers and the operator's env."""
    with living_plane.api_client() as api, \
            living_env(living_plane, tmp_path_factory.mktemp("day"), api) as env:  # fmt: skip
        for name in ("shop-floor", "shop-alone"):
            create_service(env, name)
        wait_until(lambda: ready_pods(env, "shop-floor") == ready_pods(env, "shop-alone")
                   == HPA_MIN, 120, "both services at 2 Ready pods")  # fmt: skip
        # Pin the trace a little ahead so the forecast and the floor are in place.
        origin = math.ceil((time.time() + 30) / 60) * 60
        env.put_forecast(forecast_for(FORECAST, origin), name="shop-floor-forecast")
        body = policy_body("shop-floor", target="shop-floor",
                           forecast={"configMapRef": {"name": "shop-floor-forecast",
                                                      "key": "f.json"}})  # fmt: skip
        body["spec"].update(capacity={"perReplica": PER_REPLICA}, leadTime=LEAD,
                            holdTime=HOLD, headroom=HEADROOM)  # fmt: skip
        env.create_policy(body)
        env.start_operator()
        drivers = {n: LoadDriver(api, env.namespace, f"app={n}", DAY, capacity=POD_CPU,
                                 origin=origin)
                   for n in ("shop-floor", "shop-alone")}  # fmt: skip
        rec = Recorder(env, ("shop-floor", "shop-alone"), origin)
        with rec, drivers["shop-floor"], drivers["shop-alone"]:
            _sleep_until(origin + DELETE_AT)
            env.custom.delete_namespaced_custom_object(
                "floorcast.dev", "v1alpha1", env.namespace, "forecastscalingpolicies",
                "shop-floor")  # fmt: skip
            _sleep_until(origin + END)
        dump = tmp_path_factory.getbasetemp() / "living-day.json"
        dump.write_text(json.dumps({
            "records": {n: [vars(x) for x in v] for n, v in rec.record.items()},
            "drivers": {n: [vars(x) for x in d.samples] for n, d in drivers.items()},
        }))  # fmt: skip
        print(f"\n[living] record of the day: {dump}")
        yield {"env": env, "rec": rec, "drivers": drivers, "origin": origin}


def _sleep_until(wall: float) -> None:
    while time.time() < wall:
        time.sleep(min(5.0, max(0.0, wall - time.time())))


def _floor_at_peak() -> int:
    """The floor the policy implies for the peak: ceil(8 × 1.1 / 0.7) = 13
    (the floor rule of docs/policy.md)."""
    return math.ceil(PEAK * (1 + HEADROOM) / PER_REPLICA - 1e-9)


def test_record_is_complete(day) -> None:
    rec, drivers = day["rec"], day["drivers"]
    assert not rec.errors, rec.errors[:5]
    for d in drivers.values():
        assert not d.errors, d.errors[:5]
        assert d.samples and d.samples[-1].t >= END - 10


def test_predictable_peak_ready_before_it_while_the_hpa_alone_saturates(day) -> None:
    rec, drivers = day["rec"], day["drivers"]
    floor = _floor_at_peak()
    before = rec.between("shop-floor", PEAK_AT - 25, PEAK_AT - 15)
    assert before, "no snapshot just before the peak"
    assert all(s.min_replicas == floor for s in before), [s.min_replicas for s in before]
    assert all(s.ready >= floor for s in before), [s.ready for s in before]
    sat_floor = drivers["shop-floor"].saturated_seconds(100, SURPRISE_AT)
    sat_alone = drivers["shop-alone"].saturated_seconds(100, SURPRISE_AT)
    print(f"\n[living] saturation in the predictable peak: floorcast {sat_floor:.0f} s, "
          f"HPA alone {sat_alone:.0f} s")  # fmt: skip
    # The HPA alone needs metrics (15 s resolution), a sync and 40 s of start-up.
    assert sat_alone >= LIVING.pod_ready_delay, sat_alone
    assert sat_floor <= 5, sat_floor


def test_surprise_above_the_forecast_the_hpa_scales_above_the_floor(day) -> None:
    rec = day["rec"]
    floor = _floor_at_peak()
    during = rec.between("shop-floor", SURPRISE_AT + 20, DOWN_AT)
    # The HPA stops within its tolerance of the target ([HPA doc] "Algorithm details":
    # no change while |1 - usage/target| <= 0.1), so it asks for at least
    # ceil(12 / (0.7 × 1.1)) = 16 replicas, above the floor of 13.
    want = math.ceil(SURPRISE / (PER_REPLICA * 1.1) - 1e-9)
    assert max(s.desired or 0 for s in during) >= want, [s.desired for s in during]
    assert max(s.ready for s in during) > floor, [s.ready for s in during]
    # floorcast neither fights nor lowers what the HPA chose: minReplicas stays the floor.
    assert all(s.min_replicas == floor for s in during), [s.min_replicas for s in during]


def test_after_the_peak_the_floor_lowers_and_the_hpa_scales_down(day) -> None:
    rec = day["rec"]
    settled = rec.between("shop-floor", DELETE_AT - 20, DELETE_AT)
    assert settled and all(s.min_replicas == HPA_MIN for s in settled), settled
    need = math.ceil(BASE / PER_REPLICA)  # 2 at 1 core
    assert all(s.ready <= max(need, HPA_MIN) + 1 for s in settled), [s.ready for s in settled]


def test_deleting_the_policy_restores_the_baseline_and_settles_like_the_hpa_alone(day) -> None:
    rec, env = day["rec"], day["env"]
    end = rec.between("shop-floor", END - 20, END + 10)
    alone = rec.between("shop-alone", END - 20, END + 10)
    assert end and alone
    assert all(s.min_replicas == HPA_MIN for s in end)
    assert not any(k.startswith("floorcast.dev/") for k in end[-1].annotations), end[-1]
    assert end[-1].ready == alone[-1].ready, (end[-1], alone[-1])
    assert env.events("FloorRaised"), "the operator posted no FloorRaised event"


def _model_vs_real(day, name: str, t1: float) -> Agreement:
    rec, drv = day["rec"], day["drivers"][name]
    sync = int(LIVING_HPA_SYNC.rstrip("s"))
    load = on_grid(0, t1, sync, DAY)
    snaps = rec.between(name, -60, t1)
    # minReplicas over time as recorded (the floor for one twin, 2 for the other).
    mins = np.array([[next((s.min_replicas for s in reversed(snaps) if s.t <= k * sync),
                           HPA_MIN) for k in range(load.size)]])  # fmt: skip
    target = HPA_TARGET / 100
    model = model_run(load, mins, sync_seconds=sync, per_replica=PER_REPLICA, capacity=POD_CPU,
                      target=target, max_replicas=HPA_MAX, scale_down_window=SCALE_DOWN_WINDOW,
                      ready_delay=LIVING.pod_ready_delay,
                      metric_resolution=float(LIVING.metric_resolution.rstrip("s")))  # fmt: skip
    real = real_minutes(drv.samples, 0, t1, POD_CPU)
    agr = Agreement(*zip(model, real, strict=True))
    print("\n[fidelity] " + agr.line(f"{name}, {t1 / 60:.1f} min"))
    return agr


@pytest.mark.parametrize("name", ["shop-alone", "shop-floor"])
def test_hpa_model_agrees_with_the_real_controller(day, name: str) -> None:
    """core/hpa_model.py on the same trace and settings as the living cluster:
    replica-minutes within 10 %, saturation within 25 % or 2 minutes (e2e/fidelity.py)."""
    agr = _model_vs_real(day, name, DELETE_AT)
    assert agr.ok(), agr.line(name)
