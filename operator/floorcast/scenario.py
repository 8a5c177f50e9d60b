"""The built-in demo scenario: an invented online shop with three services.

All of it is made up, for demos and examples only (never for checking the maths):
"Larder Lane", a grocery web shop whose storefront peaks at lunch and in the
evening, a search service that follows the storefront, and a nightly report job.
Everything is generated from a seed so every run, test and screenshot is the same.
"""

from __future__ import annotations

from dataclasses import dataclass
from importlib import resources

import numpy as np
import pandas as pd

from floorcast.core.forecasting.engine import forecast_batch
from floorcast.core.series import Series

#: Monday 00:00 UTC; two weeks of history start here.
HISTORY_START = pd.Timestamp("2026-11-16T00:00:00Z")
HISTORY_DAYS = 14
#: The day after the history: what the demo forecasts and plans.
FORECAST_START = HISTORY_START + pd.Timedelta(days=HISTORY_DAYS)
#: A past one-off sale inside the history (a Friday evening), masked by forecasting.
PAST_SALE = (pd.Timestamp("2026-11-27T18:00:00Z"), pd.Timestamp("2026-11-27T22:00:00Z"), 1.8)
#: A stretch of history with no samples (a scrape outage), to show gap handling.
HISTORY_GAP = (pd.Timestamp("2026-11-20T03:10:00Z"), pd.Timestamp("2026-11-20T03:30:00Z"))
#: The HPA the demo's Deployments get (and the planner and back-test assume).
BASELINE, HPA_MAX, TARGET = 2, 20, 0.8


@dataclass(frozen=True)
class Service:
    name: str
    unit: str
    per_replica: float
    description: str


SERVICES = (
    Service("storefront", "cores", 0.8, "web shop front end: lunch and evening peaks"),
    Service("search", "requests/s", 150.0, "product search: follows the storefront"),
    Service("reports", "cores", 1.0, "nightly report generator: 02:00-04:00 batch"),
)


def _bump(hours: np.ndarray, centre: float, width: float) -> np.ndarray:
    """A smooth daily peak (wrapped Gaussian in hours of day)."""
    d = (hours - centre + 12.0) % 24.0 - 12.0
    return np.exp(-0.5 * (d / width) ** 2)


def profile(service: str, times: pd.DatetimeIndex) -> np.ndarray:
    """The noise-free expected load of a service at the given instants."""
    hours = np.asarray(times.hour + times.minute / 60.0, dtype=float)
    weekend = np.asarray(times.day_of_week >= 5)
    if service == "storefront":
        lunch = 3.6 * _bump(hours, 12.6, 0.9)
        evening = 5.4 * _bump(hours, 20.2, 1.4)
        base = 0.5 + 0.25 * _bump(hours, 15.0, 4.0)
        load = base + np.where(weekend, 0.6 * lunch + 1.25 * evening, lunch + evening)
        return load
    if service == "search":
        shifted = times - pd.Timedelta(minutes=10)
        return 40.0 + 150.0 * profile("storefront", shifted)
    if service == "reports":
        batch = 2.8 * (_bump(hours, 3.0, 0.55) > 0.2) * (0.8 + 0.2 * _bump(hours, 3.0, 0.55))
        return 0.05 + batch * np.where(weekend, 0.4, 1.0)
    raise KeyError(f"unknown demo service {service!r}")


def service(name: str) -> Service:
    for s in SERVICES:
        if s.name == name:
            return s
    raise KeyError(f"unknown demo service {name!r}")


def history(name: str, *, step: str = "1min", seed: int = 7) -> Series:
    """Two weeks of noisy history with the past sale and one gap, as a ``Series``.

    The gap is reported separately (``history_csv`` drops those rows) because a
    ``Series`` is regular by construction.
    """
    n = int(pd.Timedelta(days=HISTORY_DAYS) / pd.Timedelta(step))
    times = pd.date_range(HISTORY_START, periods=n, freq=step)
    rng = np.random.default_rng(seed + sum(map(ord, name)))
    mean = profile(name, times)
    start, end, factor = PAST_SALE
    if name in ("storefront", "search"):
        in_sale = (times >= start) & (times < end)
        mean = np.where(in_sale, mean * factor, mean)
    noise = rng.normal(0.0, 0.06, len(times)) + 0.04 * np.sin(np.arange(len(times)) / 97.0)
    values = np.maximum(mean * (1.0 + noise), 0.0)
    return Series(
        start=times[0],
        step=pd.Timedelta(step),
        values=values,
        unit=service(name).unit,
        source=f"demo:{name}",
    )


def history_csv(name: str, *, step: str = "1min", seed: int = 7) -> str:
    """History as the CSV a user would export, including the scrape gap."""
    s = history(name, step=step, seed=seed)
    times = s.times
    keep = ~((times >= HISTORY_GAP[0]) & (times < HISTORY_GAP[1]))
    stamps = times[keep].strftime("%Y-%m-%dT%H:%M:%SZ")
    rows = [f"{t},{v:.4f}" for t, v in zip(stamps, s.values[keep], strict=True)]
    return "timestamp,value\n" + "\n".join(rows) + "\n"


def demo_forecast(name: str, *, start: pd.Timestamp = FORECAST_START, hours: int = 24) -> Series:
    """A forecast built from the scenario's own shape, with a band that widens.

    Stands in for ``floorcast forecast`` output so the planner can be shown on its
    own; the band's ±12 % (+2 % per 6 h) is invented, like the rest of the scenario.
    """
    times = pd.date_range(start, periods=hours * 12, freq="5min")
    value = profile(name, times)
    width = 0.12 + 0.02 * np.arange(len(times)) / 72.0
    return Series(
        start=times[0],
        step=pd.Timedelta("5min"),
        values=value,
        lower=value * (1.0 - width),
        upper=value * (1.0 + width),
        unit=service(name).unit,
        generated=start - pd.Timedelta(minutes=30),
        source=f"demo:{name}-forecast",
        meta={"method": "demo-profile"},
    )


def policy_text(service: str) -> str:
    """The bundled demo policy YAML for a service (``data/shop/``), so the offline
    and the live demo apply the very same policies."""
    return (resources.files("floorcast") / "data" / "shop" / f"{service}.yaml").read_text()


def forecast_shop(*, step: str = "5min", horizon: str = "24h") -> dict[str, Series]:
    """Forecast every service from its history in one engine call (as ``floorcast
    forecast --history-dir`` would), masking the past sale so it is not learnt."""
    hist = [history(s.name, step=step) for s in SERVICES]
    start, end, _ = PAST_SALE
    result = forecast_batch(
        hist,
        horizon=horizon,
        event_windows=[(start, end)],
        generated=FORECAST_START,
    )
    return {s.name: result.series(i) for i, s in enumerate(SERVICES)}
