"""Forecasts fetched over HTTP(S), only from hosts the operator's owner allowed.

The operator runs with cluster credentials inside the cluster network; a policy author
who could make it fetch any URL could use it to probe internal services. So the URL
must match the operator-level allow-list (a host, or a pinned scheme, port and path
prefix: ``Settings.url_refusal``), plain http can be refused (``--https-only``), a
private CA can be trusted (``--ca-bundle``), redirects are never followed (a redirect
could leave the list), the body is capped and every request has a timeout.

Every policy is reconciled on the timer, so an unchanged forecast would be downloaded
and parsed again every 30 s per policy. The last good answer per URL is kept with its
validators: the next request is conditional (``If-None-Match`` / ``If-Modified-Since``,
RFC 9110 section 13.1) and a ``304 Not Modified`` reuses the parsed forecast; a server
that sends no validators still saves the parse when the body's digest is unchanged.
Failures are never cached: the next reconcile tries again.
"""

from __future__ import annotations

import functools
import hashlib
import ssl
import time
import urllib.error
import urllib.request
from dataclasses import dataclass, replace
from typing import Any
from urllib.parse import urlsplit

from floorcast.controller.settings import Settings
from floorcast.controller.state import (
    FORECAST_INVALID,
    FORECAST_MISSING,
    URL_NOT_ALLOWED,
    ForecastState,
)
from floorcast.sources.configmap import MAX_CACHED_POINTS, BoundedLru, parse_state, points_of


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, req, fp, code, msg, headers, newurl):  # type: ignore[no-untyped-def]
        return None  # surfaces as an HTTPError with the 3xx code


_OPENER = urllib.request.build_opener(_NoRedirect)


@functools.lru_cache(maxsize=4)
def _opener(ca_bundle: str | None) -> urllib.request.OpenerDirector:
    """One opener per CA bundle (the SSL context loads the file once)."""
    if ca_bundle is None:
        return _OPENER
    context = ssl.create_default_context(cafile=ca_bundle)
    return urllib.request.build_opener(_NoRedirect, urllib.request.HTTPSHandler(context=context))


@dataclass(frozen=True)
class _Fetched:
    etag: str | None
    last_modified: str | None
    digest: str
    state: ForecastState
    #: time.monotonic() until which the server said the body stays fresh
    #: (``Cache-Control: max-age``); before then no request is sent at all.
    fresh_until: float = 0.0


#: The longest ``max-age`` honoured: a server's promise of a day is not a reason to
#: miss a new forecast for a day (common practice, no source).
MAX_FRESH_SECONDS = 3600.0


def max_age(header: str | None) -> float:
    """Seconds from ``Cache-Control`` (RFC 9111 §5.2.2.1 max-age; no-cache / no-store
    mean 0), capped at MAX_FRESH_SECONDS; no header or a bad value: 0 (revalidate)."""
    if not header:
        return 0.0
    seconds = 0.0
    for part in header.lower().split(","):
        name, _, value = part.strip().partition("=")
        if name in ("no-cache", "no-store"):
            return 0.0
        if name == "max-age":
            try:
                seconds = float(int(value.strip().strip('"')))
            except ValueError:
                return 0.0
    return max(0.0, min(seconds, MAX_FRESH_SECONDS))


class UrlCache:
    """The last good forecast per URL; an LRU bounded by entries and parsed points
    (``configmap.MAX_CACHED_POINTS``), shared by the reconcile threads."""

    def __init__(self, size: int = 2048, max_points: int = MAX_CACHED_POINTS) -> None:
        self._lru = BoundedLru(size, max_points)

    def get(self, url: str) -> _Fetched | None:
        hit = self._lru.get(url)
        return hit if isinstance(hit, _Fetched) else None

    def put(self, url: str, value: _Fetched) -> None:
        self._lru.put(url, value, points_of(value.state))


def redact(url: str) -> str:
    """Scheme, host and path only: a query string may carry a token."""
    p = urlsplit(url)
    return f"{p.scheme}://{p.hostname}{':' + str(p.port) if p.port else ''}{p.path}"


def forecast_from_url(url: str, settings: Settings, cache: UrlCache | None = None) -> ForecastState:
    """Fetch and parse; every failure is a ForecastState with a condition reason."""
    try:
        host = urlsplit(url).hostname
    except ValueError:
        host = None
    shown = redact(url) if host else url[:80]
    refused = settings.url_refusal(url)
    if refused is not None:
        return ForecastState(reason=URL_NOT_ALLOWED, message=f"{shown} {refused}; not fetched")
    cap = settings.max_forecast_bytes
    known = cache.get(url) if cache is not None else None
    if known is not None and time.monotonic() < known.fresh_until:
        return known.state  # still fresh by the server's own Cache-Control
    request = urllib.request.Request(url)
    if known is not None and known.etag:
        request.add_header("If-None-Match", known.etag)
    if known is not None and known.last_modified:
        request.add_header("If-Modified-Since", known.last_modified)
    limit = settings.url_timeout_seconds
    try:
        with _opener(settings.ca_bundle).open(request, timeout=limit) as resp:
            body = _read(resp, cap + 1, time.monotonic() + limit)
            etag, modified = resp.headers.get("ETag"), resp.headers.get("Last-Modified")
            fresh = time.monotonic() + max_age(resp.headers.get("Cache-Control"))
    except _TooSlow:
        return ForecastState(reason=FORECAST_MISSING,
                             message=f"{shown}: body not received within {limit:g}s")  # fmt: skip
    except urllib.error.HTTPError as e:
        if e.code == 304 and known is not None:
            ttl = max_age(e.headers.get("Cache-Control") if e.headers else None)
            if cache is not None and ttl:
                cache.put(url, replace(known, fresh_until=time.monotonic() + ttl))
            return known.state
        return ForecastState(reason=FORECAST_MISSING, message=f"{shown}: HTTP {e.code}")
    except (urllib.error.URLError, TimeoutError, OSError) as e:
        why = getattr(e, "reason", None) or e
        return ForecastState(reason=FORECAST_MISSING, message=f"{shown}: {why}")
    if len(body) > cap:
        return ForecastState(reason=FORECAST_INVALID, message=f"{shown}: over {cap} bytes")
    digest = hashlib.sha256(body).hexdigest()
    if known is not None and known.digest == digest:
        state = known.state
    else:
        state = _parse(body, shown, cap)
    if cache is not None and state.series is not None:
        cache.put(url, _Fetched(etag, modified, digest, state, fresh))
    return state


class _TooSlow(Exception):
    pass


def _read(resp: Any, cap: int, deadline: float) -> bytes:
    """Up to ``cap`` bytes by a deadline for the whole body. The socket timeout alone
    bounds each read, so a server trickling a byte at a time could hold a reconcile
    thread (one of a few) for as long as it liked."""
    chunks, size = [], 0
    while size < cap:
        if time.monotonic() > deadline:
            raise _TooSlow
        chunk = resp.read1(min(65536, cap - size))
        if not chunk:
            break
        chunks.append(chunk)
        size += len(chunk)
    return b"".join(chunks)


def _parse(body: bytes, shown: str, cap: int) -> ForecastState:
    try:
        text = body.decode("utf-8-sig")
    except UnicodeDecodeError:
        return ForecastState(reason=FORECAST_INVALID, message=f"{shown}: not UTF-8 text")
    return parse_state(text, shown, cap)
