"""The accuracy guard on the living cluster: the real HPA controller reports the CPU
metrics-server measures, the operator compares that load with the forecast, trips
when they part, falls back to the baseline, and recovers when the load returns
(docs/policy.md, "Accuracy guard").

Set-up: 1-core Pods, HPA target 70 % (perReplica 0.7 cores), HPA minReplicas 2 (the
baseline), a forecast of a flat 2.5 cores, headroom 0.1, guard window 1m (the CRD's
least), recoverAfter 30s, maxError 0.5, maxExceedance 0.5, action Baseline. By hand:

* the floor is sized for 2.5 × 1.1 = 2.75 cores: ceil(2.75 / 0.7) = ceil(3.93) = 4,
  above the baseline 2;
* the real load is 2.5 first: 4 Pods at 62.5 %, so the HPA reports 62-63 % and the
  operator reads 62.5 / 70 × 4 × 0.7 = 2.5 cores; WAPE |2.5 − 2.5| / 2.5 = 0 and the
  load is never above the sized 2.75 (exceedance 0): ForecastAccurate True;
* the load drops to 1.0: 4 Pods at 25 %, read as 1.0. Per observation the WAPE is
  |1.0 − 2.5| / 1.0 = 150 % (exceedance still 0: it trips on the WAPE alone). After
  d seconds of it in a 60 s window of 2.5, WAPE = 1.5·d / (2.5·(60 − d) + 1.0·d), past
  50 % once d > 33 s. Tripped: the floor falls to the baseline 2; the HPA, wanting
  ceil(4 × 25 / 70) = 2, scales down; 2 Pods at 50 % still read 1.0;
* the load returns to 2.5: 2 Pods at 125 %, the HPA scales itself to
  ceil(2 × 125 / 70) = 4; readings within leadTime (1m) of that scale are skipped
  (new Pods take 40 s to be Ready and the HPA's status counts them before their CPU
  does); then WAPE 0 again, and after recoverAfter of that the guard recovers and the
  floor is 4 again.

Seen in four runs: tripped 35-51 s after the drop (the 33 s plus 2-18 s before
metrics-server and the HPA show the new load), floorcast_forecast_error_ratio
0.50-0.54 at the trip and 1.500 with the window full, recovered 126-138 s after the
return and 30-31 s after the figures were first within limits; about 6 minutes.
"""

from __future__ import annotations

import math
import re
import socket
import sys
import time
import urllib.request
from typing import Any

import pytest

from e2e.living_env import (
    HPA_MIN,
    POD_CPU,
    create_service,
    forecast_for,
    living_env,
    ready_pods,
    wait_until,
)
from e2e.load import LoadDriver
from e2e.operator_env import policy_body

NAME = "guarded"
PER_REPLICA = 0.7  # one 1-core Pod at the 70 % target
FORECAST_LOAD, DEPARTED_LOAD = 2.5, 1.0
HEADROOM = 0.1
FLOOR = math.ceil(FORECAST_LOAD * (1 + HEADROOM) / PER_REPLICA)  # 4
MAX_ERROR = 0.5
RECOVER_AFTER = 30.0  # seconds
GUARD = {"enabled": True, "window": "1m", "recoverAfter": "30s", "maxError": MAX_ERROR,
         "maxExceedance": 0.5, "action": "Baseline"}  # fmt: skip
WAPE = re.compile(r"WAPE (\d+)% \(max 50%\)")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class World:
    """The scenario's handles, the load level the driver replays, and a timeline of
    what was seen (printed, and part of every failure message)."""

    def __init__(self, env: Any, port: int) -> None:
        self.env, self.port = env, port
        self.level = FORECAST_LOAD
        self.t0 = time.monotonic()
        self.timeline: list[str] = []
        self._last = ""
        #: Tripped but not judged now (the readings skipped after a scale), and any
        #: such moment where status.accuracy still carried figures.
        self.unjudged, self.stale = 0, 0

    def load(self, t: float) -> float:
        return self.level

    def guard(self) -> dict[str, Any]:
        """ForecastAccurate, status.accuracy and the HPA, logged when they change."""
        st = self.env.policy(NAME).get("status") or {}
        cond = next((c for c in st.get("conditions") or []
                     if c["type"] == "ForecastAccurate"), {})  # fmt: skip
        h = self.env.hpa(NAME)
        util = None
        for m in (h.status.current_metrics or []) if h.status else []:
            if m.resource and m.resource.current:
                util = m.resource.current.average_utilization
        acc = st.get("accuracy") or {}
        if "not judged now" in cond.get("message", ""):
            self.unjudged += 1
            self.stale += "error" in acc or "exceedance" in acc
        line = (f"load {self.level} | {cond.get('status')} {cond.get('reason')} "
                f"error={acc.get('error')} | min {h.spec.min_replicas} current "
                f"{h.status.current_replicas if h.status else None} util {util} | "
                f"{cond.get('message')}")  # fmt: skip
        if line != self._last:
            self._last = line
            self.timeline.append(f"{time.monotonic() - self.t0:6.1f}s {line}")
            print(self.timeline[-1], file=sys.stderr)
        return {"status": cond.get("status"), "reason": cond.get("reason"),
                "message": cond.get("message", ""), "error": acc.get("error"),
                "min": h.spec.min_replicas, "floor": st.get("floor"),
                "current": h.status.current_replicas if h.status else None}  # fmt: skip

    def wait(self, probe: Any, timeout: float, what: str) -> Any:
        try:
            return wait_until(probe, timeout, what)
        except AssertionError as e:
            raise AssertionError(f"{e}\n" + "\n".join(self.timeline[-40:])) from None

    def metric(self, name: str = "floorcast_forecast_error_ratio") -> float | None:
        text = urllib.request.urlopen(f"http://127.0.0.1:{self.port}/metrics",
                                      timeout=10).read().decode()  # fmt: skip
        m = re.search(name + r'\{namespace="[^"]+",policy="' + NAME + r'"\} (\S+)', text)
        return float(m.group(1)) if m else None


@pytest.fixture(scope="module")
def world(living_plane, tmp_path_factory):
    with living_plane.api_client() as api, \
            living_env(living_plane, tmp_path_factory.mktemp("guard"), api) as env:  # fmt: skip
        create_service(env, NAME)
        wait_until(lambda: ready_pods(env, NAME) == HPA_MIN, 120, "2 Ready pods")
        origin = math.ceil(time.time() / 60) * 60
        env.put_forecast(forecast_for(lambda t: FORECAST_LOAD, origin), name=f"{NAME}-forecast")
        body = policy_body(NAME, target=NAME,
                           forecast={"configMapRef": {"name": f"{NAME}-forecast",
                                                      "key": "f.json"}})  # fmt: skip
        body["spec"].update(capacity={"perReplica": PER_REPLICA}, leadTime="1m",
                            holdTime="0s", headroom=HEADROOM, accuracyGuard=GUARD)  # fmt: skip
        env.create_policy(body)
        port = _free_port()
        env.start_operator("--metrics-port", str(port))
        w = World(env, port)
        with LoadDriver(api, env.namespace, f"app={NAME}", w.load, capacity=POD_CPU) as drv:
            yield w
            assert not drv.errors, drv.errors


def test_a_load_that_matches_the_forecast_keeps_the_floor_raised(world: World) -> None:
    g = world.wait(lambda: (g := world.guard())["status"] == "True" and g, 300,
                   "ForecastAccurate True")  # fmt: skip
    assert g["reason"] == "WithinLimits"
    m = WAPE.search(g["message"])
    assert m and int(m.group(1)) <= 10, g["message"]  # ≈ 0 by hand
    assert "of the time (max 50%) over 1m" in g["message"]
    world.wait(lambda: world.guard()["min"] == FLOOR, 60, f"minReplicas {FLOOR}")


def test_a_departing_load_trips_the_guard_and_the_baseline_comes_back(world: World) -> None:
    world.level = DEPARTED_LOAD
    began = time.monotonic()
    g = world.wait(lambda: (g := world.guard())["status"] == "False" and g, 180,
                   "ForecastAccurate False")  # fmt: skip
    took = time.monotonic() - began
    print(f"guard tripped {took:.0f} s after the load dropped", file=sys.stderr)
    assert g["reason"] == "ForecastInaccurate"
    m = WAPE.search(g["message"])
    assert m and int(m.group(1)) > 50, g["message"]
    assert f"floor at the policy's lower bound {HPA_MIN}" in g["message"]
    # Metrics lag (metrics-server 15 s, HPA sync 5 s) plus > 33 s of low readings.
    assert took > 30, took
    warned = world.env.events("ForecastInaccurate")
    assert len(warned) == 1 and warned[0].type == "Warning", warned
    assert WAPE.search(warned[0].message), warned[0].message
    world.wait(lambda: world.guard()["min"] == HPA_MIN, 30, "minReplicas back to the baseline")
    lowered = world.env.events("FloorLowered")
    assert any(f"→ {HPA_MIN}" in e.message for e in lowered), [e.message for e in lowered]
    first = world.metric()
    assert first is not None and first > MAX_ERROR, first
    # The floor's cost (docs/policy.md, "Cost of the floor"), by hand: from the moment
    # the HPA reports the low load until the trip, the floor holds 4 where the HPA alone
    # wants ceil(4 × 25 % / 70 %) = 2: 2 replicas for the 33–55 s before the trip,
    # 0.018–0.031 replica-hours; before the drop the HPA alone wanted the floor's 4.
    added = world.metric("floorcast_floor_added_replica_hours")
    assert added is not None and 0.005 <= added <= 0.08, added
    print(f"floorcast_floor_added_replica_hours {added:.4f} at the trip", file=sys.stderr)
    # Once the window holds only the departed load the exact WAPE is the hand 150 %.
    # (4 Pods at 25 % and 2 at 50 % both read exactly 1.0: the exact figure is 1.500.)
    full = world.wait(lambda: (v := world.metric()) is not None and 1.45 <= v <= 1.55 and v,
                      180, "floorcast_forecast_error_ratio ≈ 1.5")  # fmt: skip
    print(f"floorcast_forecast_error_ratio {first:.3f} at the trip, {full:.3f} with the "
          "window full", file=sys.stderr)  # fmt: skip
    # The HPA, no longer held at 4, scales down to what the load needs: 2.
    world.wait(lambda: world.guard()["current"] == HPA_MIN, 120, "the HPA back at 2 replicas")
    assert world.guard()["status"] == "False"  # still tripped


def test_the_guard_recovers_when_the_load_returns_to_the_forecast(world: World) -> None:
    def raised_to_floor() -> int:
        return sum(f"→ {FLOOR}" in e.message for e in world.env.events("FloorRaised"))

    before = raised_to_floor()  # the first raise, at the start
    world.level = FORECAST_LOAD
    began = time.monotonic()
    good_at: list[float] = []

    def recovered() -> dict[str, Any] | None:
        g = world.guard()
        if g["status"] == "False" and g["error"] is not None and g["error"] <= MAX_ERROR \
                and not good_at:  # fmt: skip
            good_at.append(time.monotonic())  # judged good, still tripped
        return g if g["status"] == "True" else None

    g = world.wait(recovered, 300, "ForecastAccurate True again")
    now = time.monotonic()
    print(f"guard recovered {now - began:.0f} s after the load returned, "
          f"{now - good_at[0]:.0f} s after its figures were first within limits"
          if good_at else "", file=sys.stderr)  # fmt: skip
    assert g["reason"] == "WithinLimits"
    # Figures within limits are not enough: they must stay so for recoverAfter.
    assert good_at, "the tripped condition never showed figures within the limits"
    assert now - good_at[0] >= RECOVER_AFTER - 5, now - good_at[0]
    # While the readings after the HPA's scale-up were skipped the condition said
    # "not judged now"; status.accuracy then carries no figures (a merge patch used to
    # leave the last ones behind, stale).
    assert world.unjudged > 0 and world.stale == 0, (world.unjudged, world.stale)
    back = world.env.events("ForecastAccurateAgain")
    assert len(back) == 1 and back[0].type == "Normal", back
    world.wait(lambda: world.guard()["min"] == FLOOR, 30, f"minReplicas {FLOOR} again")
    assert raised_to_floor() == before + 1, [e.message for e in world.env.events("FloorRaised")]
