"""Issue #14, items 3 and 6: numbers that cannot wrap, forecasts of bounded size, work
bounded by the forecast's length, and status messages that never echo content."""

from __future__ import annotations

import json
import threading
import tracemalloc

import numpy as np
import pandas as pd
import pytest

from floorcast.core import planning
from floorcast.core.series_text import MAX_FORECAST_POINTS, MAX_JSON_DEPTH, parse_forecast
from floorcast.errors import InputError
from floorcast.sources import configmap, http
from floorcast.sources.configmap import ParsedCache, forecast_from_configmap

START = pd.Timestamp("2026-03-02T12:00:00Z")


def _plan(load, *, step="5m", lead="15m", hold="0s", factor=1.0, ceiling=30, lower=2):
    return planning.plan(START, pd.Timedelta(step), np.atleast_2d(load), per_replica=1.0,
                         headroom=0.0, lead=pd.Timedelta(lead), hold=pd.Timedelta(hold),
                         lower=lower, ceiling=ceiling, event_factor=factor)  # fmt: skip


@pytest.mark.parametrize(("load", "factor"), [(5.0, 1e12), (1e300, 1.0), (1e308, 1e3)])
def test_a_need_beyond_int32_is_the_ceiling_not_a_wrap(load, factor):
    # The issue: factor 1e12 (or a value of 1e300) wrapped the int32 cast and the floor
    # silently became the baseline (2) during the event. Clamped, it is the ceiling.
    s = _plan(np.full(12, load), factor=factor)
    assert (s.floor == 30).all()
    assert (s.required == np.iinfo(np.int32).max).all()


def test_saturated_ceil_replicas():
    got = planning.ceil_replicas(np.array([2.0000000001, 1e40, np.inf, np.nan]))
    assert got.tolist() == [2, 2**31 - 1, 2**31 - 1, 2**31 - 1]


def test_window_work_is_bounded_by_the_forecast_length():
    # 1 ms steps with a 168 h hold and lead: 6e8 steps of window each side. Before the
    # bound the sliding maximum allocated (n + window) cells, about 1.2 GB here.
    n = 20_000
    load = np.where(np.arange(n) == n // 2, 9.0, 1.0)
    tracemalloc.start()
    try:
        s = _plan(load, step="1ms", lead="168h", hold="168h")
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 20 * 2**20, peak
    assert (s.floor == 9).all()  # every step's window covers the one peak
    # Same answer as a window just as long as the series (computed independently).
    ref = planning.sliding_max(np.atleast_2d(np.minimum(s.required, 30)).astype(np.uint8),
                               n - 1, n - 1)  # fmt: skip
    assert (np.maximum(ref, 2) == s.floor).all()


def _doc(step="5m", n=2, meta=None):
    pts = [{"t": (START + i * pd.Timedelta(step if n > 1 else "5m")).isoformat(),
            "value": 1.0} for i in range(n)]  # fmt: skip
    d = {"unit": "cores", "step": step, "generated": START.isoformat(), "points": pts}
    if meta is not None:
        d["meta"] = meta
    return json.dumps(d)


def cm(text):
    return forecast_from_configmap({"f.json": text}, namespace="ns", name="fc", key="f.json",
                                   max_bytes=8 << 20)  # fmt: skip


def test_huge_step_is_an_input_error_not_an_overflow():
    for step in ("99999999999h", "2562047h", "367d"):
        with pytest.raises(InputError, match="'step'"):
            parse_forecast(_doc(step=step, n=1), source="f.json")
        state = cm(_doc(step=step, n=1))
        assert state.reason == "ForecastInvalid"


def test_deep_nesting_is_refused_before_json_recurses():
    deep = '{"unit": "x", "meta": ' + "[" * 100_000 + "]" * 100_000 + ', "points": []}'
    with pytest.raises(InputError, match=f"nested deeper than {MAX_JSON_DEPTH}"):
        parse_forecast(deep, source="f.json")
    assert cm(deep).reason == "ForecastInvalid"
    # At the limit it parses: the meta block counts with the outer object.
    ok = {"a": 1}
    for _ in range(MAX_JSON_DEPTH - 2):
        ok = {"a": ok}
    assert len(parse_forecast(_doc(meta=ok), source="f.json")) == 2
    # Brackets inside strings do not count.
    assert len(parse_forecast(_doc(meta={"s": "[" * 100}), source="f.json")) == 2


def test_too_many_points_is_refused():
    with pytest.raises(InputError, match=f"over the limit of {MAX_FORECAST_POINTS}"):
        parse_forecast(_doc(step="1s", n=MAX_FORECAST_POINTS + 1), source="f.json")


def test_an_unexpected_exception_in_parsing_is_a_forecast_problem(monkeypatch):
    def boom(*_, **__):
        raise RecursionError("maximum recursion depth exceeded")

    monkeypatch.setattr(configmap, "parse_forecast", boom)
    state = cm(_doc())
    assert state.reason == "ForecastInvalid" and "RecursionError" in state.message
    url_state = http._parse(_doc().encode(), "https://f.example/x", 1 << 20)
    assert url_state.reason == "ForecastInvalid"


SECRET = "s3cr3t-token-value"


@pytest.mark.parametrize("text", [
    f"{SECRET},value\n2026-03-02T12:00:00Z,1\n",                       # the header line
    f"timestamp,value\n{SECRET},1\n",                                  # a timestamp cell
    f"timestamp,value\n2026-03-02T12:00:00Z,{SECRET}\n",               # a value cell
    json.dumps({"points": [{"t": SECRET, "value": 1}]}),               # a JSON string
    json.dumps({SECRET: 1, "points": []}),                             # a JSON key
    json.dumps({"step": SECRET, "points": [{"t": "x", "value": 1}]}),  # the step
    '{"points": [' + SECRET + "]}",                                    # a syntax error
])  # fmt: skip
def test_status_messages_never_echo_configmap_content(text):
    state = forecast_from_configmap({"f.csv": text}, namespace="ns", name="fc", key="f.csv",
                                    max_bytes=1 << 20)  # fmt: skip
    assert state.reason == "ForecastInvalid"
    assert SECRET not in state.message and "s3cr3t" not in state.message
    assert state.message.startswith("ConfigMap ns/fc key f.csv")
    # The CLI still says exactly what is wrong (that user can read the file anyway).
    with pytest.raises(InputError) as caught:
        parse_forecast(text, source="f.csv")
    assert SECRET in str(caught.value) or "column" in str(caught.value)


def test_status_message_names_row_and_column():
    csv = cm_csv("timestamp,value\n2026-03-02T12:00:00Z,1\n2026-03-02T12:05:00Z,oops\n")
    assert csv.message == "ConfigMap ns/fc key f.csv, row 3: bad value"
    js = cm('{"points": [\n  {"t": 1,}\n]}')
    assert js.message.startswith("ConfigMap ns/fc key f.json, line 2, column ")


@pytest.mark.parametrize(("rows", "kind"), [
    (["12:00", "12:05", "12:20"], "row 4: gap between points"),
    (["12:00", "12:05", "12:05"], "row 4: timestamps duplicated, unsorted or off the grid"),
    (["12:00", "12:05", "12:07"], "row 3: timestamps duplicated, unsorted or off the grid"),
])  # fmt: skip
def test_status_message_kinds(rows, kind):
    text = "timestamp,value\n" + "".join(f"2026-03-02T{r}:00Z,1\n" for r in rows)
    assert cm_csv(text).message.startswith(f"ConfigMap ns/fc key f.csv, {kind}")


def cm_csv(text):
    return forecast_from_configmap({"f.csv": text}, namespace="ns", name="fc", key="f.csv",
                                   max_bytes=1 << 20)  # fmt: skip


def test_parsed_cache_is_safe_across_threads():
    cache, errors = ParsedCache(size=64), []
    state = cm(_doc())

    def hammer(k: int) -> None:
        try:
            for i in range(5000):
                cache.put(("ns", f"fc{(i * 7 + k) % 200}", "k", "1"), state)
                cache.get(("ns", f"fc{(i * 3 + k) % 200}", "k", "1"))
        except Exception as e:  # pragma: no cover - the failure being tested for
            errors.append(e)

    threads = [threading.Thread(target=hammer, args=(k,)) for k in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == [] and len(cache) == 64 and cache.points == 64 * 2


def test_a_new_resource_version_replaces_the_cached_one():
    # A tenant rewriting one forecast must not fill the cache with old versions.
    cache = ParsedCache()
    for rv in range(50):
        forecast_from_configmap({"f.json": _doc()}, namespace="ns", name="fc", key="f.json",
                                max_bytes=1 << 20, resource_version=str(rv), cache=cache)
    assert len(cache) == 1 and cache.points == 2
    assert cache.get(("ns", "fc", "f.json", "49")) is not None
    assert cache.get(("ns", "fc", "f.json", "48")) is None


def test_cached_points_are_bounded():
    cache = ParsedCache(max_points=5)
    state = cm(_doc())  # 2 points
    for i in range(10):
        cache.put(("ns", f"fc{i}", "k", "1"), state)
    assert cache.points <= 5 and len(cache) == 2
    assert cache.get(("ns", "fc9", "k", "1")) is state  # the newest stays
