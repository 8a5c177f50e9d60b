"""One number from a Prometheus-compatible ``/api/v1/query`` endpoint: the load now.

The operator's ``spec.observedLoad.prometheusQuery`` (docs/policy.md, "Observed load
from Prometheus") is an instant query whose single series is the load in the
forecast's unit. Requests, retries and error texts are the history source's
(``prometheus_http``); the answer's shape is the API's documented one (Prometheus docs,
"HTTP API", "Instant queries": ``data.resultType`` ``vector`` with ``result[].value``
= ``[unix seconds, "text"]``, or ``scalar`` with ``result`` = ``[unix seconds,
"text"]``). Every refusal is a ``PrometheusError`` saying what to change.
"""

from __future__ import annotations

import math
import urllib.parse
from collections.abc import Mapping
from typing import Any

import pandas as pd

from floorcast.sources.prometheus_http import (
    API_PATH,
    DEFAULT_BACKOFF,
    PrometheusError,
    get_json,
    query_range_url,
    redact,
)

INSTANT_PATH = "/api/v1/query"


def query_url(url: str) -> str:
    """The instant-query endpoint for a base URL, validated as the history source's."""
    ranged = urllib.parse.urlsplit(query_range_url(url))
    path = ranged.path[: -len(API_PATH)] + INSTANT_PATH
    return urllib.parse.urlunsplit((ranged.scheme, ranged.netloc, path, ranged.query, ""))


def _sample(doc: Any) -> Any:
    """The one value of an instant answer, still as the server wrote it."""
    if not isinstance(doc, dict) or "status" not in doc:
        raise PrometheusError("the answer is JSON but not a Prometheus API response "
                              "(no 'status'); is the URL a Prometheus server?")  # fmt: skip
    if doc["status"] != "success":
        kind = doc.get("errorType")
        raise PrometheusError(f"{kind or 'error'}: {doc.get('error', 'no message')}",
                              error_type=kind)  # fmt: skip
    data = doc.get("data")
    kind = data.get("resultType") if isinstance(data, dict) else None
    result = data.get("result") if isinstance(data, dict) else None
    if kind == "scalar" and isinstance(result, list) and len(result) == 2:
        return result[1]
    if kind != "vector" or not isinstance(result, list):
        raise PrometheusError(f"expected an instant vector or scalar, got {kind!r}; a "
                              "range selector ([5m]) needs a function around it, e.g. "
                              "sum(rate(...[5m]))")  # fmt: skip
    if not result:
        # No instant in the text: the status must read the same on every reconcile.
        raise PrometheusError("returned no data; check the metric name and label "
                              "matchers, and that the metric is still being scraped")
    if len(result) > 1:
        # The count, not the label sets: whoever may write a policy learns no more of
        # Prometheus' contents through its status than a number would tell.
        raise PrometheusError(f"returned {len(result)} series; the query must return "
                              "exactly one — aggregate with sum()")  # fmt: skip
    value = result[0].get("value") if isinstance(result[0], dict) else None
    if not isinstance(value, list) or len(value) != 2:
        raise PrometheusError("malformed vector result: the series has no [time, value]")
    return value[1]


def fetch_instant(url: str, query: str, *, at: pd.Timestamp, timeout: float,
                  retries: int = 1, headers: Mapping[str, str] | None = None) -> float:  # fmt: skip
    """The query's value at ``at``: finite and not negative (a load), or a
    ``PrometheusError``. Attempts and waits together stay within ``timeout``, so one
    reconcile waits at most that long for Prometheus."""
    endpoint = query_url(url)
    if not isinstance(query, str) or not query.strip():
        raise PrometheusError("the PromQL query is empty")
    base = urllib.parse.parse_qsl(urllib.parse.urlsplit(endpoint).query)
    params = [*base, ("query", query), ("time", f"{at.timestamp():.3f}")]
    hdrs = {"Accept": "application/json", "User-Agent": "floorcast", **(headers or {})}
    try:
        doc = get_json(f"{endpoint.split('?', 1)[0]}?{urllib.parse.urlencode(params)}",
                       headers=hdrs, timeout=timeout, retries=retries,
                       backoff=DEFAULT_BACKOFF, retry_budget=timeout)  # fmt: skip
        return _load(_sample(doc))
    except PrometheusError as e:
        raise PrometheusError(e.problem, source=redact(urllib.parse.urlsplit(url.strip())),
                              status=e.status, error_type=e.error_type) from None  # fmt: skip


def _load(text: Any) -> float:
    try:
        value = float(text)
    except (TypeError, ValueError):
        raise PrometheusError(f"returned {text!r}, not a number") from None
    if not math.isfinite(value) or value < 0:
        raise PrometheusError(f"returned {text}; a load must be a finite number ≥ 0 "
                              "(NaN and ±Inf come from a division by zero, or scalar() of "
                              "no or several series)")  # fmt: skip
    return value
