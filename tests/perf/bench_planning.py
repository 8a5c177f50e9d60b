"""Benchmark: the vectorized planner against a per-workload Python loop.

10,000 workloads × 1,440 steps (one day at one minute), mixed lead/hold settings.
Targets on the 2-core dev machine: vectorized median <= 0.5 s, ratio >= 50, peak
traced memory of the vectorized run < 1 GiB.

The loop baseline is the straightforward code one would write per policy (pure
Python, one workload at a time). It is linear in the number of workloads by
construction, so it is timed on a sample and scaled; the line says so.

Run: python tests/perf/bench_planning.py [--workloads N] [--loop-sample N]
"""

from __future__ import annotations

import argparse
import math
import statistics
import time
import tracemalloc

import numpy as np
import pandas as pd

from floorcast.core import planning

T0 = pd.Timestamp("2026-12-01T00:00:00Z")
STEP = pd.Timedelta("1min")


def make_input(n: int, steps: int, seed: int = 0):
    rng = np.random.default_rng(seed)
    t = np.arange(steps) / steps
    phase = rng.uniform(0, 1, (n, 1))
    load = 2 + 6 * np.exp(-0.5 * ((t - phase) / 0.05) ** 2) + rng.gamma(1.0, 0.3, (n, steps))
    cap = rng.uniform(0.5, 2.0, n)
    leads = [pd.Timedelta(minutes=int(m)) for m in rng.choice([2, 5, 10], n)]
    holds = [pd.Timedelta(minutes=int(m)) for m in rng.choice([10, 15, 30], n)]
    lower = rng.integers(1, 4, n)
    return load, cap, leads, holds, lower


def vectorized(load, cap, leads, holds, lower):
    return planning.plan(
        T0,
        STEP,
        load,
        per_replica=cap,
        headroom=0.1,
        lead=leads,
        hold=holds,
        lower=lower,
        ceiling=50,
    ).floor


def loop(load, cap, leads, holds, lower):
    out = []
    for w in range(load.shape[0]):
        lead = math.ceil(leads[w] / STEP)
        hold = math.ceil(holds[w] / STEP)
        row = load[w].tolist()
        req = [math.ceil(x * 1.1 / cap[w] - 1e-9) for x in row]
        n = len(req)
        floor = []
        for i in range(n):
            m = max(req[max(0, i - hold) : min(n, i + lead + 1)])
            floor.append(min(max(m, int(lower[w])), 50))
        out.append(floor)
    return out


def median_time(fn, args, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn(*args)
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--workloads", type=int, default=10_000)
    ap.add_argument("--steps", type=int, default=1_440)
    ap.add_argument("--loop-sample", type=int, default=300)
    ap.add_argument("--repeats", type=int, default=5)
    a = ap.parse_args()
    args = make_input(a.workloads, a.steps)
    sample = a.loop_sample
    small = (
        args[0][:sample],
        args[1][:sample],
        args[2][:sample],
        args[3][:sample],
        args[4][:sample],
    )
    # Same answers first: a fast wrong planner is no use.
    assert np.array_equal(np.array(loop(*small)), vectorized(*small)), (
        "loop and vectorized disagree"
    )

    vec = median_time(vectorized, args, a.repeats)
    tracemalloc.start()
    vectorized(*args)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    loop_sample_s = median_time(loop, small, 3)
    loop_full = loop_sample_s * a.workloads / sample
    print(f"workloads={a.workloads} steps={a.steps}")
    print(f"vectorized median_s={vec:.3f} (target <= 0.5)")
    print(f"loop median_s={loop_sample_s:.3f} on {sample} workloads, scaled to {loop_full:.1f} s")
    print(f"vectorized peak_traced_mib={peak / 2**20:.0f} (target < 1024)")
    print(f"ratio={loop_full / vec:.0f} median_s={vec:.3f}")


if __name__ == "__main__":
    main()
