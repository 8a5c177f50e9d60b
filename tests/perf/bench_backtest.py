"""Benchmark: 28 days of 1-minute demand, 15 s HPA syncs, daily re-forecast, one
workload, three scenarios. Budget (issue 7): <= 10 s. Uses the invented demo shop's
load profile (demo data, fine for timing; the HPA rules are checked in the tests)."""

from __future__ import annotations

import sys
import time

import numpy as np
import pandas as pd

from floorcast import replay, scenario
from floorcast.core.series import Series
from floorcast.policy import load_policy_file

BUDGET_S = 10.0


def history(days: int = 28) -> Series:
    times = pd.date_range(scenario.HISTORY_START, periods=days * 1440, freq="1min")
    rng = np.random.default_rng(7)
    mean = scenario.profile("storefront", times)
    values = np.maximum(mean * (1 + rng.normal(0, 0.06, len(times))), 0)
    return Series(start=times[0], step=pd.Timedelta("1min"), values=values, unit="cores")


def main() -> int:
    spec = load_policy_file("operator/floorcast/data/shop/storefront.yaml").spec
    h = history()
    method = sys.argv[1] if len(sys.argv) > 1 else "auto"
    setup = replay.Setup(baseline=2, hpa_max=30, target_utilization=0.7, per_replica=0.8,
                         method=method)  # fmt: skip
    t0 = time.perf_counter()
    r = replay.run(spec, h, setup)
    dt = time.perf_counter() - t0
    print(f"28 days, {len(r.demand)} syncs, {r.forecast_error['forecasts']} forecasts ({method})")
    for name in ("reactive", "static_peak", "floorcast"):
        s = r.scores[r.row(name)]
        print(f"  {name:12s} under-capacity {s['under_capacity_minutes']:7.1f} min  "
              f"replica-hours {s['replica_hours']:8.1f}  peak {s['peak_utilization']:.0%}  "
              f"events {s['scale_events']}")  # fmt: skip
    print(f"time_s={dt:.2f} budget_s={BUDGET_S} {'OK' if dt <= BUDGET_S else 'OVER'}")
    return 0 if dt <= BUDGET_S else 1


if __name__ == "__main__":
    raise SystemExit(main())
