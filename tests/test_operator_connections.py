"""controller/connections.py and the `floorcast run` flags that reach Settings.

The connection bound itself is proven on the real control plane
(e2e/test_operator_connections.py); these check the arithmetic, the session kopf is
handed, and that each `run` flag lands in Settings or fails as bad input (exit 2).
"""

from __future__ import annotations

import asyncio
from typing import Any

import kopf
import pytest
from cli_run import run

from floorcast.controller import app
from floorcast.controller.connections import bounded_session, connection_limit
from floorcast.controller.settings import Settings


def test_limit_counts_three_watch_streams_per_namespace() -> None:
    # Policies, forecast ConfigMaps and HPAs: one informer each (controller/watches.py).
    from floorcast.controller.connections import WATCHED_RESOURCES
    from floorcast.controller.watches import KINDS

    assert WATCHED_RESOURCES == len(KINDS) == 3
    assert connection_limit(Settings()) == 3 + 16  # cluster-wide: one watch per resource
    assert connection_limit(Settings(namespaces=("a", "b", "c"))) == 9 + 16
    assert connection_limit(Settings(namespaces=("a",), max_api_connections=4)) == 3 + 4


def test_bounded_session_carries_the_credentials_and_the_limit() -> None:
    info = kopf.ConnectionInfo(server="https://10.0.0.1:6443", scheme="Bearer", token="t0k",
                               default_namespace="shop", insecure=True)  # fmt: skip

    async def build() -> tuple[Any, ...]:
        ctx = bounded_session(info, 7)
        s = ctx.aiohttp_session
        try:
            return (ctx.server, ctx.default_namespace, s.connector.limit,
                    s.headers.get("Authorization"))  # fmt: skip
        finally:
            await s.close()

    assert asyncio.run(build()) == ("https://10.0.0.1:6443", "shop", 7, "Bearer t0k")


@pytest.fixture
def started(monkeypatch: pytest.MonkeyPatch) -> list[Settings]:
    """What `floorcast run` would start the operator with (the operator is not started)."""
    seen: list[Settings] = []
    monkeypatch.setattr(app, "run", seen.append)
    return seen


def test_run_flags_reach_settings(started: list[Settings], capsys: pytest.CaptureFixture[str],
                                  ) -> None:  # fmt: skip
    code, _, err = run(["run", "--namespace", "shop", "--namespace", "ops", "--interval", "1m",
                        "--allow-url-host", "forecasts.shop.internal", "--dry-run",
                        "--max-api-connections", "4", "--metrics-port", "0"], capsys)  # fmt: skip
    assert code == 0, err
    (s,) = started
    assert s.namespaces == ("shop", "ops") and s.interval_seconds == 60 and s.dry_run
    assert s.observe_interval_seconds == 30  # the default
    assert s.allowed_url_hosts == ("forecasts.shop.internal",)
    assert s.max_api_connections == 4 and s.metrics_port is None
    assert connection_limit(s) == 6 + 4  # 3 watches x 2 namespaces + 4


@pytest.mark.parametrize(
    ("argv", "named"),
    [
        (["--max-api-connections", "0"], "--max-api-connections"),
        (["--interval", "500ms"], "--interval"),
        (["--interval", "soon"], "--interval"),
        (["--all-namespaces", "--namespace", "shop"], "--all-namespaces"),
        (["--identity", "me"], "--leader-elect"),
    ],
)
def test_bad_run_flags_are_bad_input(argv: list[str], named: str, started: list[Settings],
                                     capsys: pytest.CaptureFixture[str]) -> None:  # fmt: skip
    code, _, err = run(["run", *argv], capsys)
    assert code == 2 and named in err and not started, (code, err)
