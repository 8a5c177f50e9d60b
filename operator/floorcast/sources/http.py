"""Forecasts fetched over HTTP(S), only from hosts the operator's owner allowed.

The operator runs with cluster credentials inside the cluster network; a policy author
who could make it fetch any URL could use it to probe internal services. So the host
must be on the operator-level allow-list, redirects are never followed (a redirect
could leave the list), the body is capped and every request has a timeout.
"""

from __future__ import annotations

import urllib.error
import urllib.request
from urllib.parse import urlsplit

from floorcast.controller.settings import Settings
from floorcast.controller.state import (
    FORECAST_INVALID,
    FORECAST_MISSING,
    URL_NOT_ALLOWED,
    ForecastState,
)
from floorcast.core.series import parse_forecast
from floorcast.errors import InputError


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, req, fp, code, msg, headers, newurl):  # type: ignore[no-untyped-def]
        return None  # surfaces as an HTTPError with the 3xx code


_OPENER = urllib.request.build_opener(_NoRedirect)


def redact(url: str) -> str:
    """Scheme, host and path only: a query string may carry a token."""
    p = urlsplit(url)
    return f"{p.scheme}://{p.hostname}{':' + str(p.port) if p.port else ''}{p.path}"


def forecast_from_url(url: str, settings: Settings) -> ForecastState:
    """Fetch and parse; every failure is a ForecastState with a condition reason."""
    try:
        host = urlsplit(url).hostname
    except ValueError:
        host = None
    shown = redact(url) if host else url[:80]
    if not settings.url_host_allowed(host):
        return ForecastState(reason=URL_NOT_ALLOWED,
                             message=f"host {host!r} of {shown} is not in the operator's "
                                     "--allow-url-host list; not fetched")  # fmt: skip
    cap = settings.max_forecast_bytes
    try:
        with _OPENER.open(url, timeout=settings.url_timeout_seconds) as resp:
            body = resp.read(cap + 1)
    except urllib.error.HTTPError as e:
        return ForecastState(reason=FORECAST_MISSING, message=f"{shown}: HTTP {e.code}")
    except (urllib.error.URLError, TimeoutError, OSError) as e:
        why = getattr(e, "reason", None) or e
        return ForecastState(reason=FORECAST_MISSING, message=f"{shown}: {why}")
    if len(body) > cap:
        return ForecastState(reason=FORECAST_INVALID, message=f"{shown}: over {cap} bytes")
    try:
        text = body.decode("utf-8-sig")
        return ForecastState(series=parse_forecast(text, source=shown, max_bytes=cap))
    except UnicodeDecodeError:
        return ForecastState(reason=FORECAST_INVALID, message=f"{shown}: not UTF-8 text")
    except InputError as e:
        return ForecastState(reason=FORECAST_INVALID, message=str(e))
