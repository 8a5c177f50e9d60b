"""How many connections the operator keeps to the API server.

Each informer (controller/watches.py: policies, labelled ConfigMaps, HPAs, once per
namespace given or once cluster-wide) holds one connection for its watch stream; the
reconcile workers, the lease renewal and the lead-time reads share the rest, at most
``--max-api-connections``. ``connection_limit`` sizes the sync client's pool
(app.py) and kopf's own session (which, watching nothing, hardly uses it).

Why a cap at all: unbounded, a start-up flood opens one TLS connection per request in
flight. Measured with tests/perf/bench_operator.py at 500 policies when kopf still
watched: 513-608 sockets open during the flood and an RSS peak (VmHWM) of 317-338 MiB,
about 0.35 MiB per connection, none of it Python objects (tracemalloc saw 88 MiB in
all). With the pool capped at 20 the same run peaked at 174 MiB.
"""

from __future__ import annotations

import aiohttp
import kopf

from floorcast.controller.settings import Settings

#: Kinds the informers watch (watches.py): ForecastScalingPolicies, ConfigMaps, HPAs.
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
