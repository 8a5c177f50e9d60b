"""Operator settings in one place, so `floorcast run`, the handlers and tests agree.

Defaults are the safe ones: a 30 s timer, no URL host allowed (a policy's URL must be
allowed explicitly, or the operator could be used to probe the cluster network), and
the same 1 MiB cap on a forecast whether it comes from a ConfigMap or a URL.
"""

from __future__ import annotations

from dataclasses import dataclass

FORECAST_LABEL = "floorcast.dev/forecast"
MAX_FORECAST_BYTES = 1 << 20


@dataclass(frozen=True)
class Settings:
    namespaces: tuple[str, ...] = ()  # empty: all namespaces
    interval_seconds: float = 30.0
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

    @property
    def all_namespaces(self) -> bool:
        return not self.namespaces

    def url_host_allowed(self, host: str | None) -> bool:
        """Exact host names only (case-insensitive): no wildcards, nothing to get wrong."""
        return bool(host) and host.lower() in {h.lower() for h in self.allowed_url_hosts}
