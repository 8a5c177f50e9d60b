"""Operator settings in one place, so `floorcast run`, the handlers and tests agree.

Defaults are the safe ones: a 10-minute safety-net resync (policies wake at their
planned changes and on input changes, controller/schedule.py), no URL host allowed (a
policy's URL must be allowed explicitly, or the operator could be used to probe the
cluster network), and the same 1 MiB cap on a forecast whether it comes from a ConfigMap or a URL.
"""

from __future__ import annotations

from dataclasses import dataclass
from urllib.parse import unquote, urlsplit

from floorcast.errors import InputError

FORECAST_LABEL = "floorcast.dev/forecast"
MAX_FORECAST_BYTES = 1 << 20
_DEFAULT_PORTS = {"http": 80, "https": 443}


@dataclass(frozen=True)
class UrlRule:
    """One ``--allow-url-host`` entry. A bare host (``forecasts.example``) allows that
    host on any scheme, port and path, as before; a URL form
    (``https://forecasts.example:8443/shop/``) pins the scheme, the port (the scheme's
    default when none is written) and a path prefix, matched on whole segments."""

    host: str
    scheme: str | None = None
    port: int | None = None
    path_prefix: str = "/"

    def allows(self, scheme: str, host: str, port: int | None, path: str) -> bool:
        if host.lower() != self.host:
            return False
        if self.scheme is None:
            return True
        if scheme != self.scheme or (port or _DEFAULT_PORTS[scheme]) != self.port:
            return False
        prefix = self.path_prefix.rstrip("/")
        return not prefix or path == prefix or path.startswith(prefix + "/")


def parse_url_rule(text: str) -> UrlRule:
    """``host`` or ``scheme://host[:port][/path-prefix]``; anything else is bad input."""
    t = text.strip()
    if "://" not in t:
        if not t or any(c in t for c in "/:?#@ "):
            raise InputError(f"--allow-url-host: {text!r} is not a host name or an "
                             "http(s)://host[:port]/prefix URL")  # fmt: skip
        return UrlRule(host=t.lower())
    try:
        p = urlsplit(t)
        port = p.port
    except ValueError:
        p, port = None, None
    if (p is None or p.scheme not in _DEFAULT_PORTS or not p.hostname or p.query
            or p.fragment or p.username or p.password):  # fmt: skip
        raise InputError(f"--allow-url-host: {text!r} must be http(s)://host[:port][/prefix] "
                         "without user, query or fragment")  # fmt: skip
    return UrlRule(host=p.hostname.lower(), scheme=p.scheme,
                   port=port or _DEFAULT_PORTS[p.scheme], path_prefix=p.path or "/")  # fmt: skip


@dataclass(frozen=True)
class Settings:
    namespaces: tuple[str, ...] = ()  # empty: all namespaces
    #: The safety-net resync: the longest a policy goes without a reconcile when
    #: nothing wakes it (controller/schedule.py).
    interval_seconds: float = 600.0
    #: How often a policy that observes load (live correction) is reconciled, and how
    #: often a forecast no watch reports (a URL, an unlabelled ConfigMap) is read.
    observe_interval_seconds: float = 30.0
    #: Reconcile worker threads (controller/workers.py).
    workers: int = 4
    allowed_url_hosts: tuple[str, ...] = ()
    dry_run: bool = False
    metrics_port: int | None = 8080
    liveness_port: int | None = 8081
    log_format: str = "text"  # or "json"
    kubeconfig: str | None = None
    url_timeout_seconds: float = 5.0
    max_forecast_bytes: int = MAX_FORECAST_BYTES
    api_timeout_seconds: float = 10.0
    #: kopf's API connections besides its watch streams (controller/connections.py).
    max_api_connections: int = 16
    #: Leader election: the Lease's name (None: standalone, for a single replica), its
    #: namespace and this replica's identity (unique per process).
    lease_name: str | None = None
    lease_namespace: str | None = None
    identity: str | None = None
    #: Refuse plain-http forecast URLs; a CA bundle (PEM file) for https forecast servers
    #: signed by a private CA (None: the system's trust store).
    https_only: bool = False
    ca_bundle: str | None = None
    #: The Prometheus-compatible server a policy's ``observedLoad.prometheusQuery`` is
    #: sent to (controller/query_load.py); None: such a policy's query is not evaluated.
    prometheus_url: str | None = None

    @property
    def all_namespaces(self) -> bool:
        return not self.namespaces

    def url_host_allowed(self, host: str | None) -> bool:
        """Exact host names only (case-insensitive): no wildcards, nothing to get wrong."""
        return bool(host) and any(parse_url_rule(h).host == host.lower()
                                  for h in self.allowed_url_hosts)  # fmt: skip

    def url_refusal(self, url: str) -> str | None:
        """Why ``url`` may not be fetched, or None. Dot segments are refused outright: a
        server may resolve ``/shop/../admin`` to a path no prefix allowed."""
        try:
            p = urlsplit(url)
            host, port = p.hostname, p.port
        except ValueError:
            return "is not a usable URL"
        if p.scheme not in _DEFAULT_PORTS or not host:
            return "is not an http(s) URL with a host"
        if self.https_only and p.scheme != "https":
            return "uses plain http, and the operator runs with --https-only"
        if any(seg in (".", "..") for seg in unquote(p.path).split("/")):
            return "has '.' or '..' path segments"
        rules = [parse_url_rule(h) for h in self.allowed_url_hosts]
        if not any(r.allows(p.scheme, host, port, p.path or "/") for r in rules):
            if any(r.host == host.lower() for r in rules):
                return "is not under an allowed scheme, port and path prefix of its host"
            return f"has host {host!r}, not in the operator's --allow-url-host list"
        return None
