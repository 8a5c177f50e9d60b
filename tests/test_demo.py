"""`floorcast demo --offline` end to end, and the live mode's forecast replay."""

from __future__ import annotations

import numpy as np
import pandas as pd
from click.testing import CliRunner

from floorcast import scenario
from floorcast.cli.demo import BASELINE, HPA_MAX, forecast_shop
from floorcast.cli.demo_live import SPEED, live_policy, replay_fast
from floorcast.cli.main import app
from floorcast.core.forecasting import METHODS
from floorcast.core.forecasting.combine import COMBINATION
from floorcast.sources.files import read_forecast


def test_offline_demo_forecasts_plans_and_writes_the_backtest_reports(tmp_path):
    r = CliRunner().invoke(app, ["demo", "--offline", "--no-plots", "-o", str(tmp_path)])
    assert r.exit_code == 0, r.output
    assert (tmp_path / "index.html").exists()
    for svc in scenario.SERVICES:
        html = (tmp_path / f"{svc.name}-backtest.html").read_text()
        assert "HPA alone" in html or "reactive" in html.lower()
        fc = read_forecast(tmp_path / f"{svc.name}-forecast.json")
        # From the engine, not a stand-in: one day at 5 minutes after the history.
        assert fc.meta["method"] in (*METHODS, COMBINATION)
        assert fc.start == scenario.FORECAST_START and len(fc) == 288
        # Against the scenario's own noise-free load (the generator is the truth here):
        # within 15 % on average (common practice, no source, for a "sane" forecast).
        truth = scenario.profile(svc.name, fc.times)
        assert np.mean(np.abs(fc.values - truth)) / np.mean(truth) < 0.15
        assert np.all(fc.lower <= fc.values) and np.all(fc.values <= fc.upper)
    assert "storefront" in r.output and "under-capacity minutes" in r.output


def test_offline_plans_raise_the_floor_only_around_the_peaks(tmp_path):
    from io import StringIO

    from rich.console import Console

    from floorcast.cli.demo import run_offline

    plans = run_offline(tmp_path, Console(file=StringIO()), plots=False)
    sf = plans["storefront"]
    floor = sf.schedule.floor[0]
    t = sf.schedule.times  # the planning grid (one minute), not the forecast's
    # Evening peak ~20:12 (scenario.profile): floor well above baseline at 20:00,
    # back at the baseline at 04:00 (the night's load needs one replica or less).
    assert floor[int(np.flatnonzero(t == pd.Timestamp("2026-11-30T20:00:00Z"))[0])] >= 10
    assert floor[int(np.flatnonzero(t == pd.Timestamp("2026-11-30T04:00:00Z"))[0])] == BASELINE
    for p in plans.values():
        assert p.schedule.floor[0].min() >= BASELINE and p.schedule.floor[0].max() <= HPA_MAX


def test_replay_fast_puts_the_peak_where_the_demo_says():
    fc = forecast_shop()["storefront"]
    now = pd.Timestamp("2026-12-01T10:00:00Z")
    fast = replay_fast(fc, now=now, peak_at=pd.Timedelta("2m"))
    assert fast.step == pd.Timedelta("5min") / SPEED
    peak = fast.times[int(np.argmax(fast.upper_or_value()))]
    assert abs(peak - (now + pd.Timedelta("2m"))) < fast.step
    np.testing.assert_array_equal(fast.values, fc.values)  # only re-stamped
    assert fast.generated == now


def test_live_policies_keep_modes_and_drop_dated_events():
    modes = {s.name: live_policy(s.name)["spec"]["mode"] for s in scenario.SERVICES}
    assert sorted(modes.values()) == ["DryRun", "Enforce", "Enforce"]
    assert all("plannedEvents" not in live_policy(s.name)["spec"] for s in scenario.SERVICES)
