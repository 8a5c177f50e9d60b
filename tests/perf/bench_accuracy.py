"""Accuracy benchmark on an open, real dataset with daily and weekly seasonality.

Dataset: half-hourly electricity demand in England and Wales, 5 June – 27 August
2000 (4032 points, 12 weeks), as shipped by the PyPI package ``pmdarima``
(``pmdarima.datasets.load_taylor``). Published source: J. W. Taylor (2003),
"Short-term electricity demand forecasting using double seasonal exponential
smoothing", Journal of the Operational Research Society 54, 799–805.

Protocol: 24-hour-ahead (48 steps) rolling origin, one origin per day over the last
``--days`` days; each forecast sees only the ``--train-weeks`` weeks before its
origin (no look-ahead). Baseline: seasonal naive with a one-week lag (the value at
the same half-hour a week earlier). Both are scored with MASE on the same scale
(in-sample one-week seasonal-naive MAE of each training window, Hyndman & Koehler
2006), so the MASE ratio is the MAE ratio.

Targets: ``auto`` MASE at least 10 % below the baseline's; 80 % bands (10 %/90 %)
cover between 75 % and 85 % of the held-out points.

Run: python tests/perf/bench_accuracy.py [--days 14] [--train-weeks 8]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from floorcast.core.forecasting.engine import forecast_batch

STEP = "30m"
DAY, WEEK = 48, 336


def load() -> np.ndarray:
    from pmdarima.datasets import load_taylor

    return np.asarray(load_taylor(), dtype=np.float64)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--days", type=int, default=14)
    ap.add_argument("--train-weeks", type=int, default=8)
    ap.add_argument("--method", default="auto")
    ap.add_argument("--season", default="auto")
    a = ap.parse_args()
    y = load()
    n = len(y)
    train = a.train_weeks * WEEK
    origins = [n - (d + 1) * DAY for d in range(a.days)][::-1]
    if origins[0] < train:
        raise SystemExit(f"not enough data: {a.days} days after {a.train_weeks} training weeks")
    hist = np.stack([y[o - train : o] for o in origins])
    actual = np.stack([y[o : o + DAY] for o in origins])
    season = a.season
    t = time.perf_counter()
    fc = forecast_batch(hist, step=STEP, horizon=DAY, method=a.method,
                        season=None if season == "none" else season)  # fmt: skip
    elapsed = time.perf_counter() - t
    naive = np.stack([y[o - WEEK : o - WEEK + DAY] for o in origins])
    # MASE scale per origin: in-sample MAE of the one-week seasonal naive.
    scale = np.mean(np.abs(hist[:, WEEK:] - hist[:, :-WEEK]), axis=1, keepdims=True)
    mase_auto = float(np.mean(np.abs(actual - fc.point) / scale))
    mase_naive = float(np.mean(np.abs(actual - naive) / scale))
    inside = (actual >= fc.lower) & (actual <= fc.upper)
    coverage = float(np.mean(inside))
    methods = {m: fc.method.count(m) for m in sorted(set(fc.method))}
    print(f"dataset=taylor (pmdarima) origins={len(origins)} horizon=24h train={a.train_weeks}w")
    print(f"methods chosen: {methods}; seasons (steps): {sorted(set(fc.season.tolist()))}")
    print(f"forecast time {elapsed:.1f} s for {len(origins)} origins")
    print(f"MASE {a.method}={mase_auto:.3f} seasonal_naive_1w={mase_naive:.3f}")
    gain = 1 - mase_auto / mase_naive
    print(f"improvement={gain:.1%} (target >= 10%)  coverage_80={coverage:.1%} (target 75-85%)")
    ok = gain >= 0.10 and 0.75 <= coverage <= 0.85
    print(f"targets {'met' if ok else 'NOT met'}")


if __name__ == "__main__":
    main()
