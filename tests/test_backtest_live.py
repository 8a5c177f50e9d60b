"""The live correction in the back-test (replay_live): it uses only load observed up
to each instant, and on a level error it does what it is for."""

from __future__ import annotations

from dataclasses import replace
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest

from floorcast import replay, replay_live
from floorcast.core import correction
from floorcast.core.series import Series
from floorcast.policy import Capacity, ConfigMapRef, ForecastSource, LiveCorrection, PolicySpec

START = pd.Timestamp("2026-03-02T00:00:00Z")
STEP = pd.Timedelta("5min")
DAY = pd.Timedelta(days=1)


def _spec(enabled: bool = True) -> PolicySpec:
    return PolicySpec(
        target_name="svc",
        forecast=ForecastSource(config_map_ref=ConfigMapRef("f", "f.json"), url=None),
        capacity=Capacity(per_replica=0.7, from_hpa=False),
        lead_time=timedelta(minutes=5),
        hold_time=timedelta(0),
        headroom=0.0,
        use_upper_bound=False,
        live_correction=LiveCorrection(enabled=enabled, half_life=timedelta(minutes=10)),
    )


def _history(last_day_level: float = 1.6) -> Series:
    """8 days of 5-minute load: 2 pods' worth, 20 pods' worth from 12:00 to 14:00
    reached in one step; the last day is ``last_day_level`` × busier all day (the
    level error a seasonal-naive forecast from the day before cannot know)."""
    n = int(8 * DAY / STEP)
    t = np.arange(n) * STEP
    hour = (t % DAY) / pd.Timedelta(hours=1)
    v = np.where((hour >= 12) & (hour < 14), 14.0, 1.4)
    v[int(7 * DAY / STEP):] *= last_day_level
    return Series(start=START, step=STEP, values=v, unit="cores")


def _setup(**kw) -> replay.Setup:
    return replay.Setup(baseline=2, hpa_max=60, target_utilization=0.7, per_replica=0.7,
                        pod_startup=timedelta(minutes=5), method="seasonal-naive",
                        season=int(DAY / STEP), min_train=7 * DAY, lookback=7 * DAY,
                        ladder=(0.7, 0.5), **kw)  # fmt: skip


def test_the_correction_sees_no_load_after_each_instant():
    """Two histories equal until s and different after it (three times the load): every
    floor and every factor before s is the same, so nothing after s leaked in."""
    s = START + 7 * DAY + pd.Timedelta(hours=12, minutes=30)
    a = _history()
    later = np.asarray(a.values).copy()
    k = int((s - START) / STEP)
    later[k:] *= 3.0
    b = replace(a, values=later)
    ra, rb = replay.run(_spec(), a, _setup()), replay.run(_spec(), b, _setup())
    # The straight line between samples reaches back one step before s.
    before = (ra.start + np.arange(len(ra.demand)) * ra.sync) < s - STEP
    assert before.sum() > 1000
    fa, fb = ra.live_factor[0], rb.live_factor[0]
    np.testing.assert_array_equal(fa[before], fb[before])
    row = ra.row("floorcast")
    np.testing.assert_array_equal(ra.minimum[row][before], rb.minimum[row][before])
    # ... and after s the tripled load does move the factor: the test could fail.
    after = ~before
    assert np.nanmax(fb[after]) > np.nanmax(fa[after])


def test_a_level_error_is_corrected_and_cuts_saturation():
    h = _history(1.6)
    on = replay.run(_spec(True), h, _setup())
    off = replay.run(_spec(False), h, _setup())
    f = on.live_factor[0]
    # The factor settles near the real level error (1.6), within the clamp.
    assert np.nanmedian(f) == pytest.approx(1.6, abs=0.1)
    sat = {n: r.scores[r.row("floorcast")]["under_capacity_minutes"]
           for n, r in (("on", on), ("off", off))}  # fmt: skip
    assert sat["off"] > 2  # the forecast one level too low does saturate the peak
    assert sat["on"] < 0.5 * sat["off"]
    # Without a level error the correction leaves the floors (almost) as planned.
    same = _history(1.0)
    on1, off1 = replay.run(_spec(True), same, _setup()), replay.run(_spec(False), same, _setup())
    rh = [r.scores[r.row("floorcast")]["replica_hours"] for r in (on1, off1)]
    assert rh[0] == pytest.approx(rh[1], rel=0.02)


def test_observations_skip_the_first_sync_and_the_settling_after_a_scale():
    demand = np.arange(10, dtype=np.float64)
    scaled = np.zeros((1, 10), dtype=bool)
    scaled[0, 4] = True
    obs = replay_live.observations(demand, scaled, sync=pd.Timedelta("15s"),
                                   settle=pd.Timedelta("30s"))  # fmt: skip
    # Sync k reads the usage of interval k−1 (core.hpa_model's rule); a scale at sync 4
    # hides syncs 4 and 5 (within 30 s of it).
    want = np.array([np.nan, 0, 1, 2, np.nan, np.nan, 5, 6, 7, 8])
    np.testing.assert_array_equal(obs[0], want)


def test_an_unknown_keep_rule_is_refused():
    with pytest.raises(ValueError, match="keep rule"):
        replay.run(_spec(), _history(), _setup(correction_keep="nothing"))
    assert correction.KEEP in correction.KEEP_RULES


def test_sweep_rows_are_corrected_each_on_its_own():
    """With a sweep every floorcast row carries its own factor, and the policy's own row
    is the one a replay without the sweep gives (the rows do not mix)."""
    h = _history(1.6)
    alone = replay.run(_spec(), h, _setup())
    knobs = [(timedelta(minutes=2), 0.0), (timedelta(minutes=5), 0.2)]
    swept = replay.run(_spec(), h, _setup(), sweep=knobs)
    assert swept.live_factor.shape == (3, len(swept.demand))
    np.testing.assert_array_equal(swept.live_factor[0], alone.live_factor[0])
    row = swept.row("floorcast")
    np.testing.assert_array_equal(swept.minimum[row], alone.minimum[alone.row("floorcast")])
