"""The perfect-foresight oracle: on a steep ramp it leaves no saturation.

A floor planned at whole forecast steps meets a rise inside one step only from the
step after it; planned on the forecast read each minute (``planning.refine``, the
operator's grid) it is up a full lead time before every instant's need.
"""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pandas as pd
import pytest

from floorcast import replay
from floorcast.core import planning
from floorcast.core.series import Series
from floorcast.policy import Capacity, ConfigMapRef, ForecastSource, PolicySpec

START = pd.Timestamp("2026-03-02T00:00:00Z")


def _spec() -> PolicySpec:
    return PolicySpec(
        target_name="svc",
        forecast=ForecastSource(config_map_ref=ConfigMapRef("f", "f.json"), url=None),
        capacity=Capacity(per_replica=0.7, from_hpa=False),
        lead_time=timedelta(minutes=5),
    )


def _ramps(step: str) -> Series:
    """3 days: 2 pods' worth of load, and each day a jump to 20 pods' worth inside a
    single sample step (the replay draws it as a straight line across that step)."""
    dt = pd.Timedelta(step)
    n = int(3 * pd.Timedelta(days=1) / dt)
    t = np.arange(n) * dt
    hour = (t % pd.Timedelta(days=1)) / pd.Timedelta(hours=1)
    v = np.where((hour >= 12) & (hour < 14), 14.0, 1.4)
    return Series(start=START, step=dt, values=v, unit="cores")


def _setup(**kw) -> replay.Setup:
    day = pd.Timedelta(days=1)
    return replay.Setup(baseline=2, hpa_max=40, target_utilization=0.7, per_replica=0.7,
                        pod_startup=timedelta(minutes=5), method="seasonal-naive", season=None,
                        min_train=day, lookback=day, **kw)  # fmt: skip


@pytest.mark.parametrize("step", ["5min", "30min"])
def test_oracle_leaves_no_saturation_on_a_steep_ramp(step):
    h = _ramps(step)
    r = replay.run(_spec(), h, _setup())
    sat = {n: r.scores[r.row(n)]["under_capacity_minutes"] for n in ("reactive", "oracle")}
    assert sat["reactive"] > 5  # the ramp does outrun the HPA alone
    assert sat["oracle"] == 0.0
    # At about the HPA alone's cost: the floor is up only around the ramps.
    rh = {n: r.scores[r.row(n)]["replica_hours"] for n in ("reactive", "oracle")}
    assert rh["oracle"] <= 1.15 * rh["reactive"]
    # Planned at whole forecast steps the oracle is safe too now that each point
    # stands for the interval up to the next one (planning.cover_intervals), but it
    # pays for it: the floor rises a whole step early instead of a minute.
    coarse = replay.run(_spec(), h, _setup(plan_step=pd.Timedelta(step)))
    assert coarse.scores[coarse.row("oracle")]["under_capacity_minutes"] == 0.0
    assert coarse.scores[coarse.row("oracle")]["replica_hours"] >= rh["oracle"]


def test_refine_is_numpys_interp_on_the_same_points():
    rng = np.random.default_rng(1)
    load = rng.uniform(0, 10, (3, 7))
    fine = planning.refine(load, pd.Timedelta("5min"), pd.Timedelta("15s"))
    x = np.arange(7) * 20.0  # samples at their instants, 20 syncs apart
    for w in range(3):  # reference: numpy.interp, holding the last value past the end
        np.testing.assert_allclose(fine[w], np.interp(np.arange(140), x, load[w]))
    # Bin means sit at their bins' middles (fine bins are read at their middles too).
    mid = planning.refine(load, pd.Timedelta("5min"), pd.Timedelta("1min"), centred=True)
    ref = np.interp(np.arange(35) + 0.5, x / 4 + 2.5, load[0])
    np.testing.assert_allclose(mid[0], ref)
    with pytest.raises(planning.PlanningError, match="must divide"):
        planning.refine(load, pd.Timedelta("5min"), pd.Timedelta("7min"))


def test_the_adjust_hook_decides_what_floors_are_planned_from():
    """The plug-in point for a live correction: its forecasts, not the raw ones, are
    planned on (here it halves them, so the floors fall and the oracle does not)."""
    from dataclasses import replace

    h = _ramps("5min")
    seen = []

    def halve(rolling, history):
        seen.append(history is h)
        return replace(rolling, point=rolling.point / 2, upper=rolling.upper / 2)

    a = replay.run(_spec(), h, _setup())
    b = replay.run(_spec(), h, _setup(adjust=halve))
    assert seen == [True]
    fa, fb = (x.minimum[x.row("floorcast")] for x in (a, b))
    assert (fb <= fa).all() and fb.sum() < fa.sum()
    np.testing.assert_array_equal(a.minimum[a.row("oracle")], b.minimum[b.row("oracle")])
