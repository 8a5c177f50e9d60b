"""Forecasting speed: a fleet with ``fourier``, and one Holt-Winters fit vs statsmodels.

1. 10,000 series × 14 days at 5-minute steps (4032 points) → 24 h (288 steps) with
   ``fourier`` (weekly season). Target: <= 20 s on the 2-core dev machine.
2. Holt-Winters (additive trend and season, season 288) fitted on one such series,
   ours vs statsmodels' ``ExponentialSmoothing(...).fit()`` in the same process.
   Targets: ours >= 20× faster, in-sample SSE within 1 % of statsmodels'.

The series are synthetic (daily and weekly shapes plus noise), made here from a seed.
Last line: ``ratio=<statsmodels/ours> fourier_10k_s=<seconds>``.

Run: python tests/perf/bench_forecast.py [--series N]
"""

from __future__ import annotations

import argparse
import os

# One BLAS thread for both sides: on a 2-core machine a BLAS thread pool competing with
# anything else running distorts small-matrix timings (ours and statsmodels' alike).
# Set before numpy loads; applies to both libraries, so the ratio stays fair.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import statistics
import time
import warnings

import numpy as np

from floorcast.core.forecasting import fourier, holt_winters

DAY, WEEK = 288, 2016


def fleet(n: int, days: int = 14, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(days * DAY)
    phase = rng.uniform(0, 2 * np.pi, (n, 1))
    daily = np.sin(2 * np.pi * t / DAY + phase) + 0.4 * np.sin(4 * np.pi * t / DAY + 2 * phase)
    weekly = 0.3 * np.sin(2 * np.pi * t / WEEK + phase)
    level = rng.uniform(2, 20, (n, 1))
    return level * (1 + 0.3 * daily + weekly) + rng.normal(0, 0.3, (n, len(t)))


def timed(fn, repeats: int = 3) -> tuple[float, object]:
    times, out = [], None
    for _ in range(repeats):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times), out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--series", type=int, default=10_000)
    ap.add_argument("--repeats", type=int, default=3)
    a = ap.parse_args()

    y = fleet(a.series)
    fourier_s, fc = timed(lambda: fourier.forecast(y, season=WEEK, horizon=DAY), a.repeats)
    assert np.all(np.isfinite(fc)) and fc.shape == (a.series, DAY)
    print(f"fourier: {a.series} series x {y.shape[1]} steps -> {DAY} steps: "
          f"median {fourier_s:.2f} s (target <= 20)")  # fmt: skip

    one = y[0] + 5.0  # positive, like load
    from statsmodels.tsa.holtwinters import ExponentialSmoothing

    def reference():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            model = ExponentialSmoothing(one, trend="add", seasonal="add", seasonal_periods=DAY)
            return model.fit()

    sm_s, sm = timed(reference, a.repeats)
    ours_s, ours = timed(lambda: holt_winters.fit(one, season=DAY, trend="add", damped=False,
                                                  seasonal="add"), a.repeats)  # fmt: skip
    sm_sse = float(sm.sse)
    our_sse = float(np.ravel(ours.sse)[0])
    print(f"holt-winters fit, 1 series x {len(one)}: statsmodels {sm_s:.3f} s, ours {ours_s:.3f} s")
    print(f"in-sample SSE: statsmodels {sm_sse:.2f}, ours {our_sse:.2f} "
          f"({(our_sse / sm_sse - 1):+.2%}; target within 1 %, lower is fine)")  # fmt: skip
    print(f"ratio={sm_s / ours_s:.1f} fourier_10k_s={fourier_s:.2f}")


if __name__ == "__main__":
    main()
