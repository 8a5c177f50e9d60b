"""``serviceLevel`` in the back-test: the rolling forecasts carry their quantiles, the
floors are planned on them as the operator would (docs/backtest.md, "serviceLevel"),
and ``--sweep serviceLevel=…`` adds one row per level."""

from __future__ import annotations

import math
from dataclasses import replace
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest
from test_backtest import POLICY, _history, _setup

from floorcast import plans, replay
from floorcast.cli.backtest import parse_sweep
from floorcast.core import backtest as bt
from floorcast.errors import InputError
from floorcast.policy import load_policy_file
from floorcast.replay_floors import Knobs, floors

START = pd.Timestamp("2026-03-02T00:00:00Z")
STEP = pd.Timedelta("5min")


def _rolling() -> bt.Rolling:
    # Two forecasts of 12 points: value 2, upper band 3, quantiles 2 / 3 / 6.
    j, h = 2, 12
    q = np.broadcast_to(np.array([2.0, 3.0, 6.0])[None, :, None], (j, 3, h)).copy()
    return bt.Rolling(
        times=pd.DatetimeIndex([START, START + h * STEP]), step=STEP,
        point=np.full((j, h), 2.0), upper=np.full((j, h), 3.0), method=("m",) * j,
        season=np.zeros(j, dtype=np.int64), train=[], levels=(0.5, 0.9, 0.99), quantiles=q,
    )  # fmt: skip


def test_service_level_changes_the_floors():
    spec = replace(load_policy_file(POLICY).spec, planned_events=(), headroom=0.0)
    zero = timedelta(0)
    grid = [Knobs(zero, 0.0, zero, 0.7, s) for s in (None, 0.5, 0.99, 0.95)]
    bounds = plans.bounds_for(spec, baseline=1, hpa_max=50)
    f = floors(spec, _rolling(), grid, bounds, per_replica=1.0, base_target=0.7, plan_step=STEP)
    # headroom 0, per replica 1: the floor is the sized load rounded up. Band rule 3;
    # q0.5 = 2; q0.99 = 6; 0.95 lies between q0.9 = 3 and q0.99 = 6 (numpy.interp, the
    # reference for linear interpolation between levels).
    want = [3, 2, 6, math.ceil(np.interp(0.95, (0.5, 0.9, 0.99), (2.0, 3.0, 6.0)))]
    assert [int(f[:, g].max()) for g in range(4)] == want
    assert [int(f[:, g].min()) for g in range(4)] == want


def test_a_forecast_without_quantiles_replays_the_band():
    spec = replace(load_policy_file(POLICY).spec, planned_events=(), headroom=0.0)
    rolling = replace(_rolling(), levels=(), quantiles=None)
    zero = timedelta(0)
    grid = [Knobs(zero, 0.0, zero, 0.7, s) for s in (None, 0.99)]
    bounds = plans.bounds_for(spec, baseline=1, hpa_max=50)
    f = floors(spec, rolling, grid, bounds, per_replica=1.0, base_target=0.7, plan_step=STEP)
    assert np.array_equal(f[:, 0], f[:, 1]) and int(f.max()) == 3


def test_replay_plans_the_policys_service_level_and_sweeps_it():
    spec = replace(load_policy_file(POLICY).spec, planned_events=())
    h = _history()
    lead, head = spec.lead_time, spec.headroom
    sweep = [Knobs(lead, head, spec.hold_time, 0.7, s) for s in (None, 0.5, 0.99)]
    r = replay.run(spec, h, _setup(), sweep=sweep)
    fc = r.minimum[r.row("floorcast")]
    band, low, high = (r.minimum[r.row(f"sweep{i}")] for i in range(3))
    assert np.array_equal(fc, band)  # the policy has no serviceLevel: the band rule
    assert (low <= band).all() and (high >= band).all()
    assert low.sum() < band.sum() < high.sum()
    assert [row["serviceLevel"] for row in r.sweep] == [None, 0.5, 0.99]
    # A policy with serviceLevel 0.99 replays exactly as its sweep row did.
    r99 = replay.run(replace(spec, service_level=0.99), h, _setup())
    assert np.array_equal(r99.minimum[r99.row("floorcast")], high)


def test_sweep_parses_service_levels_within_the_fields_bounds():
    own = Knobs(timedelta(minutes=5), 0.1, timedelta(0), 0.7, None)
    grid = parse_sweep(("serviceLevel=0.9,0.99", "headroom=0,0.1"), own)
    assert sorted((k.headroom, k.service_level) for k in grid) == [
        (0.0, 0.9), (0.0, 0.99), (0.1, 0.9), (0.1, 0.99)]  # fmt: skip
    assert {k.service_level for k in parse_sweep(("headroom=0",), own)} == {None}
    for bad in ("serviceLevel=0.4", "serviceLevel=1", "serviceLevel=x"):
        with pytest.raises(InputError, match="serviceLevel"):
            parse_sweep((bad,), own)
