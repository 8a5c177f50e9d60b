"""HTTP for the Prometheus source: one GET, its retries, and errors users can act on.

Transient failures (5xx, 429, refused or reset connections, timeouts) are retried with
exponential backoff, bounded both in count and in total time, so a CLI run or a
reconcile loop never hangs on a dead server. Everything else fails at once. The error
texts follow the API's documented envelope (``status``, ``errorType``, ``error``; 400
for bad parameters, 422 for an expression that cannot run, 503 for a timeout — see
the Prometheus docs, "HTTP API", "Format overview"). Only the standard library is
used, so reading history adds no dependency.
"""

from __future__ import annotations

import http.client
import json
import logging
import ssl
import time
import urllib.error
import urllib.parse
import urllib.request
from typing import Any

from floorcast.errors import InputError

log = logging.getLogger(__name__)

API_PATH = "/api/v1/query_range"
#: A healthy server answers a two-week, 5-minute query in well under a second;
#: thirty seconds leaves room for a loaded one without stalling a reconcile loop.
DEFAULT_TIMEOUT = 30.0
#: Retries after the first attempt; with the backoff below the waits are 0.5, 1 and 2 s,
#: enough to ride out a restart or a proxy blip (common practice, no source).
DEFAULT_RETRIES = 3
DEFAULT_BACKOFF = 0.5
MAX_BACKOFF = 8.0
#: Wall-clock cap on one request's attempts and waits together.
DEFAULT_RETRY_BUDGET = 60.0
#: One series of 11,000 points is ~0.4 MB of JSON; far more means many series.
MAX_RESPONSE_BYTES = 64 * 2**20


class PrometheusError(InputError):
    """The server, the URL or the answer made the history unusable. ``status`` and
    ``error_type`` carry the HTTP code and Prometheus' ``errorType`` when known."""

    def __init__(
        self,
        message: str,
        *,
        source: str | None = None,
        status: int | None = None,
        error_type: str | None = None,
    ):
        super().__init__(message, source=source)
        self.status = status
        self.error_type = error_type


class _Transient(Exception):
    """An attempt failed in a way that may succeed if tried again."""

    def __init__(self, message: str, status: int | None = None, error_type: str | None = None):
        super().__init__(message)
        self.status = status
        self.error_type = error_type


def query_range_url(url: str) -> str:
    """The ``query_range`` endpoint for a base URL (``http://host:9090`` or a path
    prefix behind a proxy); a URL that already ends in the endpoint is kept."""
    if not isinstance(url, str) or not url.strip():
        raise PrometheusError(f"expected an http(s) URL of a Prometheus server, got {url!r}")
    parts = urllib.parse.urlsplit(url.strip())
    if parts.scheme not in ("http", "https") or not parts.netloc:
        raise PrometheusError(f"{url!r} is not an http(s) URL (e.g. http://prometheus:9090)")
    if "@" in parts.netloc:
        raise PrometheusError(
            "credentials in the URL are not supported; pass an Authorization header instead",
            source=redact(parts),
        )
    try:
        parts.port  # noqa: B018 - raises on a malformed port
    except ValueError:
        raise PrometheusError(f"{url!r} has an invalid port") from None
    if parts.fragment:
        raise PrometheusError(f"{url!r} has a '#' fragment; remove it")
    path = parts.path.rstrip("/")
    if not path.endswith(API_PATH):
        path += API_PATH
    return urllib.parse.urlunsplit((parts.scheme, parts.netloc, path, parts.query, ""))


def redact(parts: urllib.parse.SplitResult) -> str:
    """The URL for messages: never echo credentials, never the query string."""
    host = parts.netloc.rsplit("@", 1)[-1]
    return f"{parts.scheme}://{'***@' if '@' in parts.netloc else ''}{host}{parts.path}"


def _problem_text(status: int, reason: str, body: bytes) -> tuple[str, str | None]:
    try:
        doc = json.loads(body)
    except (ValueError, UnicodeDecodeError):
        doc = None
    if isinstance(doc, dict) and doc.get("error"):
        kind = doc.get("errorType")
        return f"HTTP {status}{f' {kind}' if kind else ''}: {doc['error']}", kind
    snippet = " ".join(body[:200].decode("utf-8", "replace").split())
    text = f"HTTP {status} {reason}".rstrip() + (f": {snippet}" if snippet else "")
    if status == 404:
        text += f" (is the URL the server's base URL, the part before {API_PATH}?)"
    return text, None


def _connect_problem(reason: Any) -> str:
    if isinstance(reason, ConnectionRefusedError):
        return "connection refused (is the server running and the port right?)"
    if isinstance(reason, TimeoutError):
        return "connection timed out"
    text = getattr(reason, "strerror", None) or str(reason)
    return f"cannot connect: {text}"


def _attempt(url: str, headers: dict[str, str], timeout: float) -> Any:
    req = urllib.request.Request(url, headers=headers)
    try:
        with urllib.request.urlopen(req, timeout=timeout) as resp:
            body = resp.read(MAX_RESPONSE_BYTES + 1)
            ctype = resp.headers.get_content_type()
    except urllib.error.HTTPError as e:
        text, kind = _problem_text(e.code, e.reason or "", e.read(64 * 1024))
        if e.code >= 500 or e.code == 429:  # overload, a restart, a query timeout (503)
            raise _Transient(text, e.code, kind) from None
        raise PrometheusError(text, status=e.code, error_type=kind) from None
    except TimeoutError:
        raise _Transient(f"no answer within {timeout:g}s (timeout)") from None
    except urllib.error.URLError as e:
        if isinstance(e.reason, ssl.SSLCertVerificationError):  # retrying will not help
            raise PrometheusError(
                f"TLS certificate not trusted: {e.reason.verify_message}"
            ) from None
        raise _Transient(_connect_problem(e.reason)) from None
    except (http.client.HTTPException, OSError) as e:  # reset or cut off mid-answer
        raise _Transient(f"connection failed: {e or type(e).__name__}") from None
    if len(body) > MAX_RESPONSE_BYTES:
        raise PrometheusError(
            f"the answer is over {MAX_RESPONSE_BYTES // 2**20} MiB; the "
            "query probably selects many series: aggregate it, e.g. sum(...)"
        )
    try:
        doc = json.loads(body)
    except (ValueError, UnicodeDecodeError):
        snippet = " ".join(body[:80].decode("utf-8", "replace").split())
        raise PrometheusError(
            f"the answer is not JSON (Content-Type {ctype}, starts "
            f"{snippet!r}); is the URL a Prometheus server?"
        ) from None
    return doc


def get_json(
    url: str,
    *,
    headers: dict[str, str],
    timeout: float,
    retries: int,
    backoff: float,
    retry_budget: float,
) -> Any:
    """GET ``url`` and decode its JSON. Attempts and the waits between them together
    stay within ``retry_budget`` seconds, so a dead server costs a known delay."""
    started = time.monotonic()
    attempt = 0
    while True:
        attempt += 1
        elapsed = time.monotonic() - started
        try:
            return _attempt(url, headers, max(min(timeout, retry_budget - elapsed), 0.1))
        except _Transient as e:
            elapsed = time.monotonic() - started
            delay = min(backoff * 2 ** (attempt - 1), MAX_BACKOFF)
            if attempt > retries or elapsed + delay >= retry_budget:
                tries = f"{attempt} attempt{'s' if attempt > 1 else ''}"
                raise PrometheusError(
                    f"{e} (gave up after {tries} in {elapsed:.1f}s)",
                    status=e.status,
                    error_type=e.error_type,
                ) from None
            log.warning(
                "%s; retrying in %.1fs (attempt %d of %d)", e, delay, attempt + 1, retries + 1
            )
            time.sleep(delay)


def matrix_result(doc: Any) -> list[dict[str, Any]]:
    """The series of a ``query_range`` answer; anything else is a wrong URL or server."""
    if not isinstance(doc, dict) or "status" not in doc:
        raise PrometheusError(
            "the answer is JSON but not a Prometheus API response "
            "(no 'status'); is the URL a Prometheus server?"
        )
    if doc["status"] != "success":
        kind = doc.get("errorType")
        raise PrometheusError(
            f"{kind or 'error'}: {doc.get('error', 'no message')}", error_type=kind
        )
    for w in doc.get("warnings") or ():
        log.warning("server warning: %s", w)
    data = doc.get("data")
    if not isinstance(data, dict) or data.get("resultType") != "matrix":
        got = data.get("resultType") if isinstance(data, dict) else type(data).__name__
        raise PrometheusError(f"expected a 'matrix' result from query_range, got {got!r}")
    result = data.get("result")
    if not isinstance(result, list) or not all(
        isinstance(s, dict) and isinstance(s.get("values"), list) for s in result
    ):
        raise PrometheusError("malformed matrix result: each series needs a 'values' list")
    return result
