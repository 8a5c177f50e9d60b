"""Forecast sources and the status patch: caps, the URL allow-list, null-removal."""

from __future__ import annotations

import json

from floorcast.controller.settings import Settings
from floorcast.kube.policies import status_patch
from floorcast.sources.configmap import ParsedCache, forecast_from_configmap
from floorcast.sources.http import forecast_from_url

GOOD = json.dumps({"unit": "cores", "step": "5m", "generated": "2026-03-02T12:00:00Z",
                   "points": [{"t": "2026-03-02T12:00:00Z", "value": 1},
                              {"t": "2026-03-02T12:05:00Z", "value": 2}]})  # fmt: skip


def cm(data, **kw):
    return forecast_from_configmap(data, namespace="ns", name="fc", key="f.json",
                                   max_bytes=kw.pop("max_bytes", 1 << 20), **kw)  # fmt: skip


def test_configmap_parses_and_caches_by_resource_version() -> None:
    cache = ParsedCache()
    first = cm({"f.json": GOOD}, resource_version="7", cache=cache)
    assert first.series is not None and len(first.series) == 2
    assert cm({"f.json": "garbage"}, resource_version="7", cache=cache) is first


def test_configmap_missing_key_invalid_and_oversized() -> None:
    assert cm(None).reason == "ForecastMissing"
    assert cm({"other": GOOD}).reason == "ForecastMissing"
    bad = cm({"f.json": '{"points": [oops'})
    assert bad.reason == "ForecastInvalid" and "ConfigMap ns/fc key f.json" in bad.message
    big = cm({"f.json": GOOD + " " * 100}, max_bytes=len(GOOD))
    assert big.reason == "ForecastInvalid" and "over the limit" in big.message


def test_url_outside_allow_list_is_never_fetched(monkeypatch) -> None:
    from floorcast.sources import http

    requests_made: list[str] = []
    monkeypatch.setattr(http._OPENER, "open", lambda url, **kw: requests_made.append(url))
    s = Settings(allowed_url_hosts=("forecasts.example.test",))
    got = forecast_from_url("http://10.0.0.1:9/f.json?token=secret", s)
    assert got.reason == "UrlNotAllowed" and "secret" not in got.message
    assert requests_made == []
    assert forecast_from_url("http://x.test/f", Settings()).reason == "UrlNotAllowed"


def test_url_unreachable_allowed_host_is_missing() -> None:
    s = Settings(allowed_url_hosts=("127.0.0.1",), url_timeout_seconds=1)
    assert forecast_from_url("http://127.0.0.1:9/f.json", s).reason == "ForecastMissing"


def test_status_patch_removes_keys_we_no_longer_want() -> None:
    body = status_patch({"proposedFloor": 7}, {"floor": 3, "proposedFloor": 2, "other": 1})
    assert body == {"status": {"floor": None, "proposedFloor": 7}}


def _merge(target, patch):
    """JSON Merge Patch as RFC 7386 §2 writes it in pseudo-code."""
    if not isinstance(patch, dict):
        return patch
    out = dict(target) if isinstance(target, dict) else {}
    for k, v in patch.items():
        if v is None:
            out.pop(k, None)
        else:
            out[k] = _merge(out.get(k), v)
    return out


def test_status_patch_removes_a_figure_a_nested_block_no_longer_has() -> None:
    """A guard that can no longer judge publishes no figures; the patch must remove
    the old ones, or they stay stale beside "not judged now" and the status never
    equals the decision's again (found on the living cluster, e2e/test_living_guard.py)."""
    current = {"floor": 2, "accuracy": {"error": 1.5, "exceedance": 0.0, "reason": "A",
                                        "message": "WAPE 150%"}}  # fmt: skip
    desired = {"floor": 2, "accuracy": {"reason": "A", "message": "not judged now"}}
    body = status_patch(desired, current)
    assert body["status"]["accuracy"] == {"error": None, "exceedance": None, "reason": "A",
                                          "message": "not judged now"}  # fmt: skip
    assert _merge({**current, "other": 1}, body["status"]) == {**desired, "other": 1}
    # Nothing else changes shape: a new block, a scalar, a block replaced by a scalar.
    assert status_patch({"nextChange": {"at": "t", "replicas": 3}}, {})["status"] == {
        "nextChange": {"at": "t", "replicas": 3}}  # fmt: skip
    assert _merge(current, status_patch({"accuracy": "x"}, current)["status"]) == {"accuracy": "x"}
