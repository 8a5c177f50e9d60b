"""plans.plan_policy plans on the same grid as the back-test, so `floorcast plan`, the
operator and `floorcast backtest` give the same floors (docs/policy.md, "Planning
resolution")."""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pandas as pd
import pytest

from floorcast import plans
from floorcast.core import backtest as bt
from floorcast.core import planning
from floorcast.core.series import Series
from floorcast.policy import Capacity, ConfigMapRef, ForecastSource, PlannedEvent, PolicySpec
from floorcast.replay_floors import Knobs, floors

START = pd.Timestamp("2026-12-01T00:00:00Z")


def _spec(**kw) -> PolicySpec:
    base = {"lead_time": timedelta(minutes=7), "hold_time": timedelta(minutes=3),
            "headroom": 0.1}  # fmt: skip
    return PolicySpec(
        target_name="web",
        forecast=ForecastSource(config_map_ref=ConfigMapRef("f", "f.json"), url=None),
        capacity=Capacity(per_replica=0.7, from_hpa=False),
        **{**base, **kw},
    )


def _forecast(step: str = "5min", n: int = 288, seed: int = 1) -> Series:
    rng = np.random.default_rng(seed)
    v = 5 + 4 * np.sin(np.arange(n) / 20) + rng.uniform(0, 3, n)
    return Series(start=START, step=pd.Timedelta(step), values=v, lower=v * 0.8, upper=v * 1.3)


@pytest.mark.parametrize("events", [False, True])
def test_operator_plan_and_backtest_floors_are_the_same(events):
    ev = (PlannedEvent("sale", START + pd.Timedelta("3h"), START + pd.Timedelta("4h"), 1.5),)
    spec = _spec(planned_events=ev if events else ())
    fc = _forecast()
    p = plans.plan_policy(spec, fc, baseline=2, hpa_max=40, at=START)
    rolling = bt.Rolling(times=pd.DatetimeIndex([START]), step=fc.step,
                         point=np.asarray(fc.values)[None, :], upper=np.asarray(fc.upper)[None, :],
                         method=("x",), season=np.zeros(1, dtype=np.int64), train=[])  # fmt: skip
    grid = [Knobs(spec.lead_time, spec.headroom, spec.hold_time, 0.7)]
    back = floors(spec, rolling, grid, p.bounds, per_replica=0.7, base_target=0.7,
                  plan_step=p.schedule.step)[0, 0]  # fmt: skip
    n = int(p.schedule.covered[0])
    assert p.schedule.step == pd.Timedelta("1min")
    assert n > 1000
    np.testing.assert_array_equal(p.schedule.floor[0, :n], back[:n])


def test_changes_fall_on_the_grid_and_within_the_forecast():
    p = plans.plan_policy(_spec(), _forecast(), baseline=2, hpa_max=40, at=START)
    assert p.changes
    for c in p.changes:
        assert (c.at - START) % pd.Timedelta("1min") == pd.Timedelta(0)
        assert START < c.at <= p.forecast.end
    # The schedule stops at the forecast's last point: nothing is extrapolated past it.
    assert p.schedule.times[-1] == p.forecast.end


def test_a_long_coarse_forecast_stays_within_the_point_bound():
    fc = _forecast("1h", 100_000)
    p = plans.plan_policy(_spec(lead_time=timedelta(hours=2), hold_time=timedelta(0)), fc,
                          baseline=2, hpa_max=40, at=START)  # fmt: skip
    assert p.schedule.floor.shape[1] <= planning.MAX_PLAN_POINTS
    assert p.schedule.step == pd.Timedelta("30min")  # the finest divisor of 1h that fits


def test_a_step_not_a_whole_number_of_minutes_is_planned_as_it_is():
    fc = _forecast("90s", 500)
    p = plans.plan_policy(_spec(), fc, baseline=2, hpa_max=40, at=START)
    assert p.schedule.step == pd.Timedelta("90s")
    # On its own grid each point stands for the interval up to the next one.
    need = np.maximum(np.asarray(fc.upper), np.append(np.asarray(fc.upper)[1:], fc.upper[-1]))
    want = planning.required_replicas(need[None, :], 0.7, 0.1)[0]
    np.testing.assert_array_equal(p.schedule.required[0], want)
