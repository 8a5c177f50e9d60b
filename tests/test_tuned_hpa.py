"""The HPA alone at lower targets: the scaling algebra, the ladder, equal saturation.

[HPA doc] = https://kubernetes.io/docs/tasks/run-application/horizontal-pod-autoscale/
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from floorcast.core import backtest as bt
from floorcast.core import frontier
from floorcast.core import hpa_model as hm
from floorcast.errors import InputError

SYNC = pd.Timedelta("15s")


def _demand(n: int = 2400, seed: int = 3) -> np.ndarray:
    """A noisy double ramp with a sharp burst: every HPA code path gets exercised."""
    rng = np.random.default_rng(seed)
    t = np.arange(n)
    base = 3 + 9 * np.clip(np.sin(t / n * 2 * np.pi), 0, None) + 6 * ((t % 600) > 540)
    return np.maximum(base * (1 + rng.normal(0, 0.05, n)), 0)


def test_a_lower_target_is_the_base_row_with_demand_scaled_by_the_target_ratio():
    """core.frontier's algebra: the HPA at target u' with per_replica carry·u'/u makes the
    same decisions as the HPA at carry replaying demand × u/u' — checked by running both."""
    d, carry, u = _demand(), 0.7, 0.7
    hpa = hm.HpaConfig(max_replicas=200, target_utilization=u)
    for lower in (0.5, 0.35, 0.2):
        real = hm.simulate(d, np.ones((1, len(d)), int), per_replica=carry * lower / u, hpa=hpa,
                           ready_delay_steps=20)  # fmt: skip
        scaled = hm.simulate(d * u / lower, np.ones((1, len(d)), int), per_replica=carry, hpa=hpa,
                             ready_delay_steps=20)  # fmt: skip
        np.testing.assert_array_equal(real.replicas, scaled.replicas)
        np.testing.assert_array_equal(real.ready, scaled.ready)
        # ... and it is a different trace from the base target's, so the check can fail.
        base = hm.simulate(d, np.ones((1, len(d)), int), per_replica=carry, hpa=hpa,
                           ready_delay_steps=20)  # fmt: skip
        assert real.replicas.sum() > base.replicas.sum()
        # Saturation stays physical: demand above ready pods × their 100 % capacity
        # (carry / u = 1 core here, the pod's request as the HPA doc's utilization divides by).
        m = bt.metrics(scaled, d * u / lower, per_replica=carry, target=lower, sync=SYNC)[0]
        want = float(np.sum(d > real.ready[0] * (carry / u)) * 0.25)
        assert m["under_capacity_minutes"] == pytest.approx(want)
        util = d / (real.ready[0] * (carry / u))
        assert m["peak_utilization"] == pytest.approx(util.max())


def test_metrics_take_one_target_per_row():
    tr = hm.Trace(replicas=np.array([[2, 2], [2, 2]]), ready=np.array([[2, 2], [2, 2]]),
                  scaled=np.zeros((2, 2), bool))  # fmt: skip
    # per_replica 1 at target 0.5 -> 2 per pod at 100 %; row 2 at target 0.25 replays
    # demand × 2 (0.5 / 0.25), so its capacity is the same 4 for 2 pods.
    dem = np.array([[3.0, 5.0], [6.0, 10.0]])
    m = bt.metrics(tr, dem, per_replica=1.0, target=np.array([0.5, 0.25]), sync=SYNC)
    assert [x["under_capacity_minutes"] for x in m] == [0.25, 0.25]
    assert m[0]["peak_utilization"] == pytest.approx(m[1]["peak_utilization"]) == 1.25


def test_default_ladder_runs_from_the_target_down_to_ten_percent():
    rungs = frontier.ladder(0.7)
    assert rungs[0] == 0.7 and rungs[-1] == 0.1 and len(rungs) == 13
    assert np.allclose(np.diff(rungs), -0.05)
    # A sweep running the HPA hotter lifts the top rung; explicit rungs replace all.
    assert frontier.ladder(0.7, top=0.85)[:4] == [0.85, 0.8, 0.75, 0.7]
    assert frontier.ladder(0.7, targets=[0.4, 0.6]) == [0.7, 0.6, 0.4]
    with pytest.raises(InputError, match="--ladder"):
        frontier.ladder(0.7, targets=[0.0])


def test_equal_saturation_interpolates_between_the_bracketing_rungs():
    t, sat, rh = [0.7, 0.6, 0.5, 0.4], [100.0, 40.0, 10.0, 0.0], [100.0, 120.0, 150.0, 190.0]
    p = frontier.equal_saturation(t, sat, rh, 25.0)  # halfway between 40 and 10
    assert p["found"] == "interpolated"
    assert p["target_utilization"] == pytest.approx(0.55)
    assert p["replica_hours"] == pytest.approx(135.0)
    assert frontier.saving(108.0, p) == pytest.approx(0.2)
    assert frontier.equal_saturation(t, sat, rh, 150.0)["found"] == "top"
    far = frontier.equal_saturation(t, [100.0, 40.0, 10.0, 5.0], rh, 0.0)
    assert far["found"] == "beyond_ladder" and far["replica_hours"] == 190.0
    # Non-monotone noise: the first rung from the top that is as safe decides.
    bumpy = frontier.equal_saturation(t, [100.0, 20.0, 30.0, 0.0], rh, 25.0)
    assert bumpy["target_utilization"] == pytest.approx(0.7 - 0.1 * 75 / 80)
    with pytest.raises(ValueError, match="descending"):
        frontier.equal_saturation([0.5, 0.6], [1.0, 2.0], [1.0, 2.0], 1.0)


def test_a_lower_rung_is_not_held_back_by_the_base_max_replicas():
    """Lowering the target without raising maxReplicas would let the cap, not the
    target, decide the rung: the ladder's cap grows with base / lowest target."""
    from datetime import timedelta

    from floorcast import replay
    from floorcast.core.series import Series
    from floorcast.policy import Capacity, ConfigMapRef, ForecastSource, PolicySpec

    spec = PolicySpec(target_name="svc",
                      forecast=ForecastSource(config_map_ref=ConfigMapRef("f", "k"), url=None),
                      capacity=Capacity(per_replica=0.7, from_hpa=False))  # fmt: skip
    n = 3 * 288
    hour = (np.arange(n) % 288) / 12
    h = Series(start="2026-03-02T00:00:00Z", step="5min", unit="cores",
               values=np.where((hour > 9) & (hour < 17), 6.3, 1.4))  # fmt: skip
    day = pd.Timedelta(days=1)
    setup = replay.Setup(baseline=1, hpa_max=10, target_utilization=0.7, per_replica=0.7,
                         pod_startup=timedelta(minutes=5), method="seasonal-naive",
                         season=None, min_train=day, lookback=day)  # fmt: skip
    r = replay.run(spec, h, setup)
    # 6.3 cores need 9 pods at 70 % (within the cap of 10) and 31.5 at 20 %; the
    # HPA's 10 % tolerance ([HPA doc] "Algorithm details") may stop it from 29 on.
    assert r.trace.replicas[r.row("reactive")].max() == 9
    assert 29 <= r.trace.replicas[r.row("hpa@0.2")].max() <= 32
    assert r.ladder[-1]["target_utilization"] == 0.1
