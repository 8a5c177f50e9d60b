"""Load history from a Prometheus-compatible ``/api/v1/query_range`` endpoint.

One PromQL query becomes one ``Series``. The query must select exactly one series,
because a forecast is per workload: several series are refused with their labels and
a hint to aggregate, rather than silently picking one. Prometheus refuses a range
query whose ``(end - start) / step`` exceeds 11,000 (HTTP 400 ``bad_data``,
"exceeded maximum resolution of 11,000 points per timeseries"; the check is in
Prometheus' ``web/api/v1/api.go``, queryRange), so long ranges are fetched in chunks
of at most ``max_points`` evaluation steps and stitched on the shared grid.

Requests, retries and error texts live in ``prometheus_http``; every failure is a
``PrometheusError`` (an ``InputError``) naming the server, the query and the problem.
No clock is read here: the caller (the CLI) decides what "now" is.
"""

from __future__ import annotations

import urllib.parse
from collections.abc import Mapping
from datetime import datetime, timedelta
from typing import Any

import numpy as np
import pandas as pd

from floorcast.core.series import DEFAULT_MAX_GAP, MAX_POINTS, Series, from_samples
from floorcast.durations import parse_duration
from floorcast.errors import InputError
from floorcast.sources.prometheus_http import (
    DEFAULT_BACKOFF,
    DEFAULT_RETRIES,
    DEFAULT_RETRY_BUDGET,
    DEFAULT_TIMEOUT,
    PrometheusError,
    get_json,
    matrix_result,
    query_range_url,
    redact,
)
from floorcast.timefmt import parse_rfc3339

__all__ = [
    "SERVER_MAX_POINTS",
    "PrometheusError",
    "fetch_range",
    "lookback_range",
    "parse_lookback",
    "plan_chunks",
    "query_range_url",
]

#: Prometheus' own limit on evaluation steps per range query (see the module docstring).
SERVER_MAX_POINTS = 11_000
_SHOW_SERIES = 5

TimeLike = pd.Timestamp | datetime | str
StepLike = pd.Timedelta | timedelta | str


def _timestamp(value: TimeLike, name: str) -> pd.Timestamp:
    if isinstance(value, str):
        return parse_rfc3339(value, field=name)
    if not isinstance(value, datetime):
        raise InputError(f"{name}: expected a timestamp, got {value!r}")
    t = pd.Timestamp(value)
    if t.tzinfo is None:
        raise InputError(f"{name}: {t} has no UTC offset; naive times are ambiguous")
    return t.tz_convert("UTC")


def _step(value: StepLike) -> pd.Timedelta:
    step = pd.Timedelta(parse_duration(value, field="step") if isinstance(value, str) else value)
    if step < pd.Timedelta(milliseconds=1) or step % pd.Timedelta(milliseconds=1):
        raise InputError(f"step must be a positive whole number of milliseconds, got {step}")
    return step


def parse_lookback(text: str | timedelta) -> pd.Timedelta:
    """``14d``-style look-back (Go units plus ``d``/``w``, as the CLI and CRD write them)."""
    td = text if isinstance(text, timedelta) else parse_duration(text, field="lookback")
    if td <= timedelta(0):
        raise InputError(f"lookback must be positive, got {text!r}")
    return pd.Timedelta(td)


def lookback_range(
    end: TimeLike, lookback: str | timedelta, step: StepLike
) -> tuple[pd.Timestamp, pd.Timestamp]:
    """``(start, end)`` holding ``lookback // step`` samples. ``end`` (the caller's "now")
    is rounded down to a multiple of ``step`` since the epoch: the grid then matches
    ``resample``'s and repeated runs ask for the same instants, so results are
    reproducible."""
    t, lb, st = _timestamp(end, "end"), parse_lookback(lookback), _step(step)
    n = lb // st
    if n < 1:
        raise InputError(f"lookback {lookback!r} is shorter than the step {st}")
    epoch = pd.Timestamp(0, tz="UTC")
    last = epoch + ((t - epoch) // st) * st
    return last - (n - 1) * st, last


def plan_chunks(start_ms: int, end_ms: int, step_ms: int, max_points: int) -> list[tuple[int, int]]:
    """Consecutive ``(start, end)`` ms pairs on the grid ``start + k*step`` covering
    ``[start, end]``, each with at most ``max_points`` samples and none shared, so the
    stitched result has no duplicate at a boundary."""
    last = (end_ms - start_ms) // step_ms
    return [
        (start_ms + a * step_ms, start_ms + min(a + max_points - 1, last) * step_ms)
        for a in range(0, last + 1, max_points)
    ]


def _seconds(ms: int) -> str:
    # Exact decimal seconds: Prometheus parses start/end/step as float seconds.
    return f"{ms // 1000}.{ms % 1000:03d}"


def _iso_ms(ms: int) -> str:
    unit = "s" if ms % 1000 == 0 else "ms"
    return str(np.datetime_as_string(np.datetime64(int(ms), "ms"), unit=unit)) + "Z"


def _series_name(labels: Mapping[str, str]) -> str:
    name = labels.get("__name__", "")
    inner = ", ".join(f'{k}="{v}"' for k, v in sorted(labels.items()) if k != "__name__")
    return f"{name}{{{inner}}}"


# ------------------------------------------------------------------------ the fetch


def fetch_range(
    url: str,
    query: str,
    *,
    start: TimeLike,
    end: TimeLike,
    step: StepLike,
    timeout: float = DEFAULT_TIMEOUT,
    max_points: int = SERVER_MAX_POINTS,
    retries: int = DEFAULT_RETRIES,
    backoff: float = DEFAULT_BACKOFF,
    retry_budget: float = DEFAULT_RETRY_BUDGET,
    headers: Mapping[str, str] | None = None,
    unit: str | None = None,
    max_gap: pd.Timedelta | None = DEFAULT_MAX_GAP,
    gap_fill: str = "linear",
) -> Series:
    """Evaluate ``query`` at ``start, start+step, ... <= end`` and return it as history.

    Evaluation instants where the query has no value (a scrape outage longer than
    the server's look-back) arrive as gaps, which are filled up to ``max_gap`` and
    flagged exactly as for CSV history. ``timeout`` is per attempt, ``retries`` counts
    attempts after the first, ``retry_budget`` caps one request's attempts and waits
    in seconds. ``headers`` (e.g. ``Authorization``) are sent with every request.
    """
    endpoint = query_range_url(url)
    src_url = redact(urllib.parse.urlsplit(url.strip()))
    if not isinstance(query, str) or not query.strip():
        raise PrometheusError("the PromQL query is empty", source=src_url)
    shown = " ".join(query.split())
    shown = shown if len(shown) <= 120 else shown[:117] + "..."
    source = f"{src_url} query {shown!r}"
    t0, t1, st = _timestamp(start, "start"), _timestamp(end, "end"), _step(step)
    if t1 < t0:
        raise InputError(f"end {t1.isoformat()} is before start {t0.isoformat()}")
    if not isinstance(max_points, int) or max_points < 1:
        raise InputError(f"max_points must be a positive integer, got {max_points!r}")
    if timeout <= 0 or retries < 0 or backoff < 0 or retry_budget <= 0:
        raise InputError(
            "timeout and retry_budget must be positive; retries and backoff must not be negative"
        )
    ms = pd.Timedelta(milliseconds=1)
    start_ms, end_ms = (int(t.round("ms").value // 10**6) for t in (t0, t1))
    step_ms = int(st // ms)
    if (end_ms - start_ms) // step_ms + 1 > MAX_POINTS:
        raise InputError(
            f"{(end_ms - start_ms) // step_ms + 1} samples requested, over the "
            f"limit of {MAX_POINTS}; use a longer step or a shorter range"
        )
    base_params = urllib.parse.parse_qsl(urllib.parse.urlsplit(endpoint).query)
    bare = endpoint.split("?", 1)[0]
    hdrs = {"Accept": "application/json", "User-Agent": "floorcast", **(headers or {})}

    found: dict[tuple[tuple[str, str], ...], list[list[Any]]] = {}
    for a, b in plan_chunks(start_ms, end_ms, step_ms, max_points):
        params = [
            *base_params,
            ("query", query),
            ("start", _seconds(a)),
            ("end", _seconds(b)),
            ("step", _seconds(step_ms)),
        ]
        try:
            doc = get_json(
                f"{bare}?{urllib.parse.urlencode(params)}",
                headers=hdrs,
                timeout=timeout,
                retries=retries,
                backoff=backoff,
                retry_budget=retry_budget,
            )
            result = matrix_result(doc)
        except PrometheusError as e:
            raise PrometheusError(
                e.problem, source=source, status=e.status, error_type=e.error_type
            ) from None
        for s in result:
            metric = s.get("metric") if isinstance(s.get("metric"), dict) else {}
            found.setdefault(tuple(sorted(metric.items())), []).extend(s["values"])

    if not found:
        raise PrometheusError(
            f"the query returned no series between {_iso_ms(start_ms)} and "
            f"{_iso_ms(end_ms)}; check the metric name and label "
            "matchers",
            source=source,
        )
    if len(found) > 1:
        names = sorted(_series_name(dict(k)) for k in found)
        listed = ", ".join(names[:_SHOW_SERIES])
        if len(names) > _SHOW_SERIES:
            listed += f", ... {len(names) - _SHOW_SERIES} more"
        example = f"sum({shown})" if len(shown) <= 60 else "sum(...)"
        raise PrometheusError(
            f"the query returned {len(names)} series ({listed}); "
            f"aggregate it to one, e.g. {example}",
            source=source,
        )
    [(labels, points)] = found.items()
    return _to_series(
        points,
        dict(labels),
        query=query,
        source=source,
        step=st,
        unit=unit,
        max_gap=max_gap,
        gap_fill=gap_fill,
    )


def _to_series(
    points: list[Any],
    labels: dict[str, str],
    *,
    query: str,
    source: str,
    step: pd.Timedelta,
    unit: str | None,
    max_gap: pd.Timedelta | None,
    gap_fill: str,
) -> Series:
    try:
        ts = np.asarray([p[0] for p in points], dtype=np.float64)
        raw = [p[1] for p in points]
        values = np.asarray([float(v) for v in raw], dtype=np.float64)
    except (TypeError, ValueError, IndexError, KeyError):
        raise PrometheusError(
            'malformed sample in the answer; expected [unix_time, "value"] pairs', source=source
        ) from None
    t_us = np.rint(ts * 1000).astype(np.int64) * 1000  # the API has ms resolution
    # Chunks never overlap, but a proxy or a compatible server may echo a boundary
    # sample twice: keep the first of each instant.
    t_us, first = np.unique(t_us, return_index=True)
    values, raw = values[first], [raw[i] for i in first]
    bad = np.flatnonzero(~np.isfinite(values) | (values < 0))
    if bad.size:
        i = int(bad[0])
        at = _iso_ms(int(t_us[i]) // 1000)
        why = (
            "is not a finite number (a division by zero in the query?)"
            if not np.isfinite(values[i])
            else "is negative (load cannot be below zero)"
        )
        raise PrometheusError(f"value {raw[i]!r} at {at} {why}", source=source)
    return from_samples(
        t_us,
        values,
        source=source,
        kind="sample",
        step=step,
        max_gap=max_gap,
        gap_fill=gap_fill,
        unit=unit,
        meta={"query": query, "labels": labels},
    )
