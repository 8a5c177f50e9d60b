"""A bounded connection pool for kopf's own API calls (watch streams and its patches).

kopf's built-in aiohttp session has no connection limit (``TCPConnector(limit=0)``), so
the start-up flood — every policy resumed at once, each with a kopf patch of its
annotations — opens one TLS connection per request in flight. Measured with
tests/perf/bench_operator.py at 500 policies: 513-608 sockets open during the flood and
an RSS peak (VmHWM) of 317-338 MiB, about 0.35 MiB per connection, none of it Python
objects (tracemalloc saw 88 MiB in all). With the pool capped at 20, the same run
peaked at 174 MiB and settled sooner (33 s against 36-57 s): requests wait for a free
connection instead of each paying a handshake.

Watch streams hold their connection for up to ``server_timeout``, so the cap is the
watches plus ``max_api_connections``: a cap below the watch count would starve every
patch behind them. kopf watches two resources here (policies, labelled ConfigMaps),
once per namespace it was given or once cluster-wide.
"""

from __future__ import annotations

import aiohttp
import kopf

from floorcast.controller.settings import Settings

#: Resources kopf watches (see handlers.py): ForecastScalingPolicies, ConfigMaps, HPAs.
WATCHED_RESOURCES = 3


def connection_limit(settings: Settings) -> int:
    """Long-lived watch streams plus the pool for everything else."""
    scopes = 1 if settings.all_namespaces else len(settings.namespaces)
    return WATCHED_RESOURCES * scopes + settings.max_api_connections


def bounded_session(info: kopf.ConnectionInfo, limit: int) -> kopf.AiohttpSession:
    """The session kopf would build from ``info``, with a connection limit.

    Must be called inside the running event loop (an async login handler). kopf closes
    the session itself when these credentials are dropped (Vault cache flush).
    """
    session = aiohttp.ClientSession(
        connector=aiohttp.TCPConnector(limit=limit, ssl=info.as_ssl_context()),
        headers=info.as_http_headers(),
        proxy=info.proxy_url,
        trust_env=info.trust_env,
    )
    return kopf.AiohttpSession(
        server=info.server,
        priority=info.priority,
        default_namespace=info.default_namespace,
        expiration=info.expiration,
        aiohttp_session=session,
    )
