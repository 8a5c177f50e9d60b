"""Shared pytest fixtures for tests/."""

from __future__ import annotations

import urllib.request
from collections.abc import Iterator

import pytest

# ---------------------------------------------------------------- Prometheus server
# Self-contained: a real Prometheus (Debian package) with backfilled synthetic history,
# started once per session on a free loopback port and stopped at the end. Missing
# binaries FAIL the tests (never skip) so CI cannot pass without running them.


@pytest.fixture(scope="session")
def prometheus_server() -> Iterator[object]:
    from prometheus_server import HarnessError, running_server

    try:
        with running_server() as server:
            yield server
    except HarnessError as e:
        pytest.fail(f"Prometheus test server: {e}", pytrace=False)


@pytest.fixture
def requests_made(monkeypatch: pytest.MonkeyPatch) -> list[str]:
    """Every URL opened through urllib, so tests can count requests and read ranges."""
    seen: list[str] = []
    real = urllib.request.urlopen

    def spy(req, *a, **kw):  # type: ignore[no-untyped-def]
        seen.append(req.full_url if isinstance(req, urllib.request.Request) else req)
        return real(req, *a, **kw)

    monkeypatch.setattr(urllib.request, "urlopen", spy)
    return seen
