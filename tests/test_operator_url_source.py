"""Forecasts over HTTP from a real local server: conditional GETs, caps, no redirects.

The server is the standard library's ``http.server`` on 127.0.0.1, so the requests are
real HTTP; what it saw (paths and validator headers) is recorded and asserted.
Validator semantics from RFC 9110 section 13.1 (If-None-Match, If-Modified-Since) and
15.4.5 (304 Not Modified carries no body).
"""

from __future__ import annotations

import json
import threading
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import pytest

from floorcast.controller.settings import Settings
from floorcast.sources.http import MAX_FRESH_SECONDS, UrlCache, forecast_from_url, max_age


def forecast(value: float) -> bytes:
    return json.dumps({"unit": "cores", "step": "5m", "generated": "2026-03-02T12:00:00Z",
                       "points": [{"t": "2026-03-02T12:00:00Z", "value": value},
                                  {"t": "2026-03-02T12:05:00Z", "value": 2}]}).encode()  # fmt: skip


@dataclass
class Served:
    """What the server answers, and the (path, If-None-Match, If-Modified-Since) it saw."""

    body: bytes = field(default_factory=lambda: forecast(1))
    etag: str | None = '"v1"'
    last_modified: str | None = None
    status: int = 200
    location: str | None = None
    trickle: float = 0.0  # seconds between bytes of the body (0: all at once)
    cache_control: str | None = None
    seen: list[tuple[str, str | None, str | None]] = field(default_factory=list)


@pytest.fixture
def server() -> Iterator[tuple[str, Served]]:
    served = Served()

    class Handler(BaseHTTPRequestHandler):
        def do_GET(self) -> None:  # the stdlib's name
            inm, ims = self.headers.get("If-None-Match"), self.headers.get("If-Modified-Since")
            served.seen.append((self.path, inm, ims))
            fresh = (served.etag and inm == served.etag) or (
                served.last_modified and ims == served.last_modified)  # fmt: skip
            if served.status == 200 and fresh:
                self.send_response(304)
                self.end_headers()
                return
            self.send_response(served.status)
            for name, value in (("ETag", served.etag), ("Last-Modified", served.last_modified),
                                ("Location", served.location),
                                ("Cache-Control", served.cache_control)):  # fmt: skip
                if value:
                    self.send_header(name, value)
            self.send_header("Content-Length", str(len(served.body)))
            self.end_headers()
            if not served.trickle:
                self.wfile.write(served.body)
                return
            for i in range(len(served.body)):
                try:
                    self.wfile.write(served.body[i : i + 1])
                    self.wfile.flush()
                except OSError:  # the client gave up: that is the point
                    return
                time.sleep(served.trickle)

        def log_message(self, *_: object) -> None:
            pass

    httpd = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    thread = threading.Thread(target=httpd.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{httpd.server_address[1]}", served
    finally:
        httpd.shutdown()
        httpd.server_close()


SETTINGS = Settings(allowed_url_hosts=("127.0.0.1",), url_timeout_seconds=2)


def test_unchanged_forecast_is_not_downloaded_again(server) -> None:
    base, served = server
    cache = UrlCache()
    first = forecast_from_url(f"{base}/f.json", SETTINGS, cache)
    assert first.series is not None and first.series.values[0] == 1
    again = forecast_from_url(f"{base}/f.json", SETTINGS, cache)
    assert again is first  # the 304 reused the parsed forecast
    assert served.seen == [("/f.json", None, None), ("/f.json", '"v1"', None)]


def test_cache_control_max_age_skips_the_request_while_fresh(server) -> None:
    # RFC 9111 §5.2.2.1: a response with max-age=N is fresh for N seconds.
    base, served = server
    served.cache_control = "public, max-age=300"
    cache = UrlCache()
    first = forecast_from_url(f"{base}/f.json", SETTINGS, cache)
    assert forecast_from_url(f"{base}/f.json", SETTINGS, cache) is first
    assert len(served.seen) == 1  # no second request while fresh
    assert (max_age("no-cache, max-age=60"), max_age("max-age=x"), max_age(None)) == (0, 0, 0)
    assert max_age("max-age=86400") == MAX_FRESH_SECONDS
    served.cache_control = None
    other = forecast_from_url(f"{base}/g.json", SETTINGS, cache)  # no header: revalidate
    assert forecast_from_url(f"{base}/g.json", SETTINGS, cache) is other
    assert served.seen[-1] == ("/g.json", '"v1"', None)


def test_a_new_version_replaces_the_cached_one(server) -> None:
    base, served = server
    cache = UrlCache()
    forecast_from_url(f"{base}/f.json", SETTINGS, cache)
    served.body, served.etag = forecast(5), '"v2"'
    new = forecast_from_url(f"{base}/f.json", SETTINGS, cache)
    assert new.series is not None and new.series.values[0] == 5
    assert served.seen[-1] == ("/f.json", '"v1"', None)
    assert forecast_from_url(f"{base}/f.json", SETTINGS, cache) is new


def test_last_modified_alone_is_a_validator(server) -> None:
    base, served = server
    served.etag, served.last_modified = None, "Mon, 02 Mar 2026 12:00:00 GMT"
    cache = UrlCache()
    first = forecast_from_url(f"{base}/f.json", SETTINGS, cache)
    assert forecast_from_url(f"{base}/f.json", SETTINGS, cache) is first
    assert served.seen[-1] == ("/f.json", None, "Mon, 02 Mar 2026 12:00:00 GMT")


def test_no_validators_still_skips_the_parse_of_an_identical_body(server) -> None:
    base, served = server
    served.etag = None
    cache = UrlCache()
    first = forecast_from_url(f"{base}/f.json", SETTINGS, cache)
    assert forecast_from_url(f"{base}/f.json", SETTINGS, cache) is first
    assert len(served.seen) == 2  # downloaded twice: nothing to make the GET conditional


def test_failures_are_not_cached(server) -> None:
    base, served = server
    cache = UrlCache()
    served.status = 500
    down = forecast_from_url(f"{base}/f.json", SETTINGS, cache)
    assert down.reason == "ForecastMissing" and "HTTP 500" in down.message
    served.status = 200
    assert forecast_from_url(f"{base}/f.json", SETTINGS, cache).series is not None
    served.body, served.etag = b'{"points": [oops', '"v3"'
    bad = forecast_from_url(f"{base}/f.json", SETTINGS, cache)
    assert bad.reason == "ForecastInvalid" and "/f.json" in bad.message
    forecast_from_url(f"{base}/f.json", SETTINGS, cache)
    assert served.seen[-1][1] == '"v1"'  # the invalid v3 never replaced the good v1


def test_redirects_are_refused_and_bodies_capped(server) -> None:
    base, served = server
    served.status, served.location = 302, "http://10.0.0.1/internal"
    moved = forecast_from_url(f"{base}/f.json", SETTINGS)
    assert moved.reason == "ForecastMissing" and "HTTP 302" in moved.message
    assert [p for p, *_ in served.seen] == ["/f.json"]  # nothing followed the Location
    served.status, served.location = 200, None
    small = Settings(allowed_url_hosts=("127.0.0.1",), max_forecast_bytes=40)
    big = forecast_from_url(f"{base}/f.json?token=secret", small)
    assert big.reason == "ForecastInvalid" and "over 40 bytes" in big.message
    assert "secret" not in big.message  # the query string may carry a token


def test_a_server_trickling_the_body_is_cut_off_at_the_timeout(server) -> None:
    """Each byte comes well within the socket timeout, so only a deadline for the whole
    body stops it; a reconcile thread must not be held for minutes."""
    base, served = server
    served.trickle = 0.2
    fast = Settings(allowed_url_hosts=("127.0.0.1",), url_timeout_seconds=1)
    began = time.monotonic()
    got = forecast_from_url(f"{base}/f.json", fast)
    took = time.monotonic() - began
    assert got.reason == "ForecastMissing" and "not received within 1s" in got.message
    assert took < 2.5, took  # the body alone would take len(body) * 0.2 s ≈ a minute
