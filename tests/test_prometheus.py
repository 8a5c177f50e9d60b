"""The Prometheus history source, against a real Prometheus server.

The server (tests/prometheus_server.py, fixture in conftest.py) holds three backfilled
``demo_load`` series at 1-minute resolution whose exact values the harness knows.
"""

from __future__ import annotations

import itertools
import urllib.parse

import numpy as np
import pandas as pd
import pytest

from floorcast.core.series import SeriesError
from floorcast.errors import InputError
from floorcast.sources.prometheus import (
    PrometheusError,
    fetch_range,
)

STOREFRONT = 'demo_load{service="storefront"}'
MINUTE = pd.Timedelta(minutes=1)


def ts(unix: int) -> pd.Timestamp:
    return pd.Timestamp(unix, unit="s", tz="UTC")


def params_of(url: str) -> dict[str, str]:
    return dict(urllib.parse.parse_qsl(urllib.parse.urlsplit(url).query))


# ------------------------------------------------------------- against the real server


def test_values_round_trip_exactly(prometheus_server) -> None:
    h = prometheus_server.history
    s = fetch_range(
        prometheus_server.url, STOREFRONT, start=ts(h.start), end=ts(h.end), step="1m", unit="cores"
    )
    # The reference is the float written into the OpenMetrics file. Exact equality holds
    # because Prometheus stores float64 and prints the shortest round-tripping decimal
    # (strconv.FormatFloat(v, 'f', -1, 64) in its JSON encoder; from memory).
    assert s.start == ts(h.start) and s.step == MINUTE and len(s) == len(h.times)
    assert np.array_equal(s.values, np.array(h.values["storefront"]))
    assert not s.filled_mask().any() and s.unit == "cores"
    assert s.meta["labels"] == {"__name__": "demo_load", "service": "storefront"}
    assert prometheus_server.url in s.source and STOREFRONT in s.source


def test_evaluation_instants_take_the_latest_sample(prometheus_server) -> None:
    # Prometheus docs, "Querying basics": an instant selector evaluated at t returns the
    # most recent sample at or before t within the look-back delta (5m by default).
    # So a 5-minute step 30 s after the grid reads every fifth sample.
    h = prometheus_server.history
    s = fetch_range(
        prometheus_server.url,
        STOREFRONT,
        start=ts(h.start + 30),
        end=ts(h.start + 30 + 6 * 3600),
        step=pd.Timedelta(minutes=5),
    )
    assert s.start == ts(h.start + 30) and s.step == pd.Timedelta(minutes=5)
    assert np.array_equal(s.values, np.array(h.values["storefront"][: 6 * 60 + 1 : 5]))


def test_chunked_fetch_equals_one_request(prometheus_server, requests_made) -> None:
    h = prometheus_server.history
    kw = {"start": ts(h.start), "end": ts(h.end), "step": "1m"}
    whole = fetch_range(prometheus_server.url, STOREFRONT, **kw)
    assert len(requests_made) == 1
    chunked = fetch_range(prometheus_server.url, STOREFRONT, max_points=500, **kw)
    urls = requests_made[1:]
    assert len(urls) == -(-len(h.times) // 500) == 6  # ceil(2881 / 500)
    spans = [(float(params_of(u)["start"]), float(params_of(u)["end"])) for u in urls]
    assert all((b - a) / 60 + 1 <= 500 for a, b in spans)
    # Consecutive chunks abut one step apart: no instant is fetched twice or skipped.
    assert all(nxt[0] - prev[1] == 60 for prev, nxt in itertools.pairwise(spans))
    assert chunked == whole and len(chunked) == len(h.times)


def test_server_point_limit_and_chunking_around_it(prometheus_server, requests_made) -> None:
    h = prometheus_server.history
    url = prometheus_server.url
    # Prometheus web/api/v1/api.go (queryRange): refused when (end - start)/step > 11000,
    # so 11,001 evaluation instants are the most one request may hold.
    ok = fetch_range(
        url, STOREFRONT, start=ts(h.start), end=ts(h.start + 110_000), step="10s", max_points=11_001
    )
    assert len(ok) == 11_001 and len(requests_made) == 1
    with pytest.raises(PrometheusError) as e:
        fetch_range(
            url,
            STOREFRONT,
            start=ts(h.start),
            end=ts(h.start + 110_010),
            step="10s",
            max_points=11_002,
        )
    assert e.value.status == 400 and e.value.error_type == "bad_data"
    assert "exceeded maximum resolution of 11,000 points" in str(e.value)
    assert len(requests_made) == 2  # a 4xx is not retried
    # The default chunking fetches the whole two days at 10 s (17,281 instants).
    s = fetch_range(url, STOREFRONT, start=ts(h.start), end=ts(h.end), step="10s")
    assert len(requests_made) == 4 and len(s) == 17_281
    # Each 1-minute sample is read at six 10 s instants (same look-back rule as above).
    expected = np.repeat(np.array(h.values["storefront"]), 6)[:17_281]
    assert np.array_equal(s.values, expected)


def test_multi_series_result_is_refused_with_labels(prometheus_server) -> None:
    h = prometheus_server.history
    with pytest.raises(PrometheusError) as e:
        fetch_range(
            prometheus_server.url, "demo_load", start=ts(h.start), end=ts(h.start + 3600), step="1m"
        )
    msg = str(e.value)
    assert "the query returned 3 series" in msg and "sum(demo_load)" in msg
    for svc in ("storefront", "search", "reports"):
        assert f'demo_load{{service="{svc}"}}' in msg
    # ... and the aggregate the message suggests is accepted and sums the three.
    total = fetch_range(
        prometheus_server.url,
        "sum(demo_load)",
        start=ts(h.start),
        end=ts(h.start + 3600),
        step="1m",
    )
    parts = [np.array(h.values[k][:61]) for k in ("storefront", "search", "reports")]
    np.testing.assert_allclose(total.values, parts[0] + parts[1] + parts[2], rtol=1e-15)
    assert total.meta["labels"] == {}


@pytest.mark.parametrize("offset", [0, -10 * 86_400])
def test_empty_result(prometheus_server, offset: int) -> None:
    h = prometheus_server.history
    query = 'demo_load{service="nope"}' if offset == 0 else STOREFRONT  # or no data then
    with pytest.raises(PrometheusError, match="the query returned no series between"):
        fetch_range(
            prometheus_server.url,
            query,
            start=ts(h.start + offset),
            end=ts(h.start + offset + 3600),
            step="1m",
        )


def test_bad_promql_gives_the_servers_message(prometheus_server, requests_made) -> None:
    h = prometheus_server.history
    with pytest.raises(PrometheusError) as e:
        fetch_range(
            prometheus_server.url, "sum(demo_load", start=ts(h.start), end=ts(h.end), step="1m"
        )
    msg = str(e.value)
    assert e.value.status == 400 and e.value.error_type == "bad_data"
    assert "HTTP 400 bad_data" in msg and "parse error" in msg
    assert msg.startswith(f"{prometheus_server.url} query 'sum(demo_load':")
    assert isinstance(e.value, InputError) and len(requests_made) == 1


def test_server_timeout_503_is_retried_then_reported(prometheus_server, requests_made) -> None:
    # A 1 ns evaluation timeout makes the real server answer 503 errorType "timeout"
    # (Prometheus docs, HTTP API, "Format overview": 503 when queries time out).
    h = prometheus_server.history
    with pytest.raises(PrometheusError) as e:
        fetch_range(
            f"{prometheus_server.url}?timeout=0.000000001",
            STOREFRONT,
            start=ts(h.start),
            end=ts(h.end),
            step="1m",
            retries=2,
            backoff=0.01,
        )
    assert e.value.status == 503 and e.value.error_type == "timeout"
    assert "query timed out" in str(e.value) and "gave up after 3 attempts" in str(e.value)
    assert len(requests_made) == 3


def test_non_finite_values_are_refused_naming_the_time(prometheus_server) -> None:
    h = prometheus_server.history
    x = h.start + 100 * 60
    # scalar() of an empty vector is NaN (PromQL function docs), so the sum turns NaN
    # from instant x on.
    nan_after_x = f"{STOREFRONT} + 0 * scalar(vector(time()) < {x})"
    cases = [
        (nan_after_x, "'NaN'", x),
        (f"{STOREFRONT} / 0", "'+Inf'", h.start),
        (f"-{STOREFRONT} / 0", "'-Inf'", h.start),
    ]
    for query, shown, at in cases:
        with pytest.raises(PrometheusError) as e:
            fetch_range(
                prometheus_server.url, query, start=ts(h.start), end=ts(h.start + 7200), step="1m"
            )
        assert f"value {shown} at {ts(at).strftime('%Y-%m-%dT%H:%M:%SZ')} " in str(e.value)
        assert "not a finite number" in str(e.value)
    with pytest.raises(PrometheusError, match="is negative"):
        fetch_range(
            prometheus_server.url,
            f"-{STOREFRONT}",
            start=ts(h.start),
            end=ts(h.start + 600),
            step="1m",
        )


def test_missing_instants_are_filled_or_refused_like_csv_history(prometheus_server) -> None:
    h = prometheus_server.history
    x = h.start + 100 * 60

    def with_hole(minutes: int) -> str:  # no value strictly inside (x, x + minutes)
        return (
            f"{STOREFRONT} and on() (vector(time()) <= {x} or vector(time()) >= {x + minutes * 60})"
        )

    s = fetch_range(
        prometheus_server.url, with_hole(10), start=ts(h.start), end=ts(h.start + 7200), step="1m"
    )
    truth = np.array(h.values["storefront"][:121])
    hole = np.arange(101, 110)
    assert np.array_equal(np.flatnonzero(s.filled_mask()), hole)
    kept = np.setdiff1d(np.arange(121), hole)
    assert np.array_equal(s.values[kept], truth[kept])
    # Linear fill across the hole, checked against numpy.interp.
    np.testing.assert_allclose(s.values[hole], np.interp(hole, [100, 110], truth[[100, 110]]))
    with pytest.raises(SeriesError, match=r"gap of 59m \(59 missing samples") as e:
        fetch_range(
            prometheus_server.url,
            with_hole(60),
            start=ts(h.start),
            end=ts(h.start + 4 * 3600),
            step="1m",
        )
    assert "over the max gap of 30m" in str(e.value)


def test_wrong_path_prefix_is_a_clear_404(prometheus_server, requests_made) -> None:
    h = prometheus_server.history
    with pytest.raises(PrometheusError) as e:
        fetch_range(
            f"{prometheus_server.url}/prom",
            STOREFRONT,
            start=ts(h.start),
            end=ts(h.start + 600),
            step="1m",
        )
    assert e.value.status == 404 and "HTTP 404" in str(e.value) and "base URL" in str(e.value)
    assert len(requests_made) == 1
