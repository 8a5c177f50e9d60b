"""``spec.observedLoad.prometheusQuery`` (docs/policy.md, "Observed load from
Prometheus"): parsing, the answer's shape, the once-per-period evaluation, the live
correction and the accuracy guard on the query's load, and all of it against a real
Prometheus server (tests/prometheus_server.py: three backfilled ``demo_load`` series
whose exact values the harness knows, ending 3–4 hours before now).

Hand-worked as in tests/test_reconcile_live.py: perReplica 1, headroom 0, the flat
forecast 1.5 with a peak of 6.5 in ten minutes, so the plan's floor is 7.
"""

from __future__ import annotations

import math
import time
from dataclasses import replace

import pandas as pd
import pytest
from test_reconcile import NOW, hpa, observed, policy
from test_reconcile_live import FC, LC

from floorcast.controller import query_load as ql
from floorcast.controller.decide import decide
from floorcast.controller.reconcile import Runtime, observe
from floorcast.controller.settings import Settings
from floorcast.policy import PolicyError, parse_policy
from floorcast.policy_observe import MAX_QUERY_LENGTH, QUERY_FIELD
from floorcast.sources.prometheus_http import PrometheusError
from floorcast.sources.prometheus_instant import _sample, fetch_instant, query_url

STOREFRONT = 'last_over_time(demo_load{service="storefront"}[6h])'
Q = "sum(rate(http_requests_total[5m]))"


def doc(**spec):
    body = {"targetRef": {"name": "web"}, "forecast": {"url": "https://f.example/x"},
            "capacity": {"perReplica": 1.0}, **spec}  # fmt: skip
    return {"apiVersion": "floorcast.dev/v1alpha1", "kind": "ForecastScalingPolicy",
            "metadata": {"name": "p", "namespace": "ns"}, "spec": body}  # fmt: skip


# ------------------------------------------------------------------------- parsing


def test_the_query_is_optional_and_kept_verbatim():
    assert parse_policy(doc()).spec.observed_load.prometheus_query is None
    assert parse_policy(doc(observedLoad=None)).spec.observed_load.prometheus_query is None
    got = parse_policy(doc(observedLoad={"prometheusQuery": Q}))
    assert got.spec.observed_load.prometheus_query == Q


@pytest.mark.parametrize(("block", "says"), [
    ({"prometheusQuery": ""}, "expected a non-empty string"),
    ({"prometheusQuery": "   "}, "expected a non-empty string"),
    ({"prometheusQuery": 5}, "expected a non-empty string"),
    ({"prometheusQuery": "x" * (MAX_QUERY_LENGTH + 1)}, f"at most {MAX_QUERY_LENGTH} allowed"),
    ({"promQuery": Q}, "did you mean 'prometheusQuery'"),
    ("sum(up)", "expected a mapping"),
])  # fmt: skip
def test_bad_queries_are_refused_naming_the_field(block, says):
    with pytest.raises(PolicyError, match=r"spec\.observedLoad") as e:
        parse_policy(doc(observedLoad=block))
    assert says in str(e.value)


# ------------------------------------------------------- the answer (pure, no server)

AT = pd.Timestamp("2026-03-02T12:00:00Z")


def vector(*values: str) -> dict:
    # Prometheus docs, "HTTP API", "Instant vectors": [{"metric": {...}, "value":
    # [<unix time>, "<sample value>"]}, ...].
    result = [{"metric": {"i": str(i)}, "value": [AT.timestamp(), v]} for i, v in
              enumerate(values)]  # fmt: skip
    return {"status": "success", "data": {"resultType": "vector", "result": result}}


def test_one_series_or_a_scalar_is_the_value():
    assert _sample(vector("4.25")) == "4.25"
    scalar = {"status": "success", "data": {"resultType": "scalar",
                                            "result": [AT.timestamp(), "2"]}}  # fmt: skip
    assert _sample(scalar) == "2"


def test_no_series_and_several_series_say_what_to_change():
    with pytest.raises(PrometheusError, match=r"^returned no data; check the metric name"):
        _sample(vector())
    with pytest.raises(PrometheusError) as e:
        _sample(vector("1", "2", "3"))
    assert str(e.value) == ("returned 3 series; the query must return exactly one — "
                            "aggregate with sum()")  # fmt: skip
    matrix = {"status": "success", "data": {"resultType": "matrix", "result": []}}
    with pytest.raises(PrometheusError, match="expected an instant vector or scalar"):
        _sample(matrix)


def test_the_instant_endpoint_sits_beside_the_range_endpoint():
    assert query_url("http://prom:9090") == "http://prom:9090/api/v1/query"
    assert query_url("https://p.example/prom/") == "https://p.example/prom/api/v1/query"
    with pytest.raises(PrometheusError, match="not an http"):
        query_url("prom:9090")


# --------------------------------------------------- once per policy per period


class Fake:
    def __init__(self, answer: float | Exception):
        self.answer, self.calls = answer, []

    def __call__(self, url: str, query: str, *, at: pd.Timestamp, timeout: float) -> float:
        self.calls.append((url, query, at, timeout))
        if isinstance(self.answer, Exception):
            raise self.answer
        return self.answer


ON = policy(liveCorrection=LC, observedLoad={"prometheusQuery": Q})
SETTINGS = Settings(prometheus_url="http://prom:9090", observe_interval_seconds=30,
                    api_timeout_seconds=7)  # fmt: skip


def test_evaluated_at_most_once_per_observe_interval():
    fake, mem, key = Fake(4.8), ql.QueryMemory(), ("ns", "p")
    at = [ql.query_load(SETTINGS, mem, key, ON, now=NOW, clock=c, fetch=fake)
          for c in (100.0, 110.0, 129.9, 130.0)]  # fmt: skip
    assert at == [(4.8, None)] * 4
    assert len(fake.calls) == 2  # at 100 and again at 130, 30 s later
    assert fake.calls[0] == ("http://prom:9090", Q, NOW, 7)
    # A changed query is asked at once, whatever the period.
    other = policy(liveCorrection=LC, observedLoad={"prometheusQuery": "sum(up)"})
    ql.query_load(SETTINGS, mem, key, other, now=NOW, clock=131.0, fetch=fake)
    assert len(fake.calls) == 3 and fake.calls[-1][1] == "sum(up)"


def test_not_asked_without_a_query_or_without_a_reader():
    fake = Fake(1.0)
    for pol in (policy(liveCorrection=LC), policy(observedLoad={"prometheusQuery": Q}), None):
        assert ql.query_load(SETTINGS, ql.QueryMemory(), ("ns", "p"), pol, now=NOW,
                             clock=0.0, fetch=fake) is None  # fmt: skip
    assert fake.calls == []


@pytest.mark.parametrize(("settings", "answer", "says"), [
    (Settings(), 1.0, f"{QUERY_FIELD} is set but the operator has no --prometheus-url"),
    (SETTINGS, PrometheusError("returned no data; check"), f"{QUERY_FIELD}: returned no data"),
    (SETTINGS, PrometheusError("connection refused (gave up after 2 attempts in 0.6s)"),
     f"{QUERY_FIELD}: connection refused (gave up after 2 attempts)"),
    (SETTINGS, KeyError("x"), f"{QUERY_FIELD} could not be evaluated (KeyError)"),
])  # fmt: skip
def test_every_failure_is_no_load_and_a_message_naming_the_field(settings, answer, says):
    load, why = ql.query_load(settings, ql.QueryMemory(), ("ns", "p"), ON, now=NOW,
                              clock=0.0, fetch=Fake(answer))  # fmt: skip
    assert load is None and why is not None and why.startswith(says)


# ------------------------------------------------- the decision on the query's load


def run(query_load, steps: int = 30, pol=ON, h=None):
    """``steps`` reconciles 30 s apart, carrying the memory like the reconcile adapter."""
    mem, gmem, d = None, None, None
    for i in range(steps):
        now = NOW - (steps - 1 - i) * pd.Timedelta("30s")
        obs = replace(observed(pol, h=h or hpa(), fc=FC), now=now, live=mem, guard=gmem,
                      status=d.status if d else {}, query_load=query_load)  # fmt: skip
        d = decide(obs)
        mem, gmem = d.live_memory, d.guard_memory
    return d


def test_the_live_correction_uses_the_query_and_needs_no_cpu_metric():
    # The HPA has no CPU target at all, so its status cannot be read as load; the
    # query's 2.4 against the forecast's 1.5 is ×1.6, and the peak 6.5 × 1.6 = 10.4
    # needs 11 replicas, capped at the HPA's max 10.
    d = run((2.4, None))
    assert d.status["liveCorrection"]["reason"] == "Active"
    assert d.live_factor == pytest.approx(1.6) and d.floor == 10


def test_a_failed_query_leaves_the_plan_never_below_it():
    why = f"{QUERY_FIELD}: returned 3 series; the query must return exactly one"
    d = run((None, why))
    assert d.status["liveCorrection"] == {"factor": 1.0, "reason": "NoObservation",
                                          "message": why}  # fmt: skip
    assert d.live_factor is None and d.floor == 7  # the plan's floor


def test_an_unchanged_failure_does_not_rewrite_the_status():
    why = f"{QUERY_FIELD}: returned no data; check the metric name"
    pol = policy(liveCorrection=LC, accuracyGuard={"enabled": True, "window": "10m"},
                 observedLoad={"prometheusQuery": Q})  # fmt: skip
    d = run((None, why), pol=pol)
    ann = {k: v for k, v in d.hpa_patch.annotations.items() if v is not None}
    carried = replace(hpa(), min_replicas=d.hpa_patch.min_replicas, annotations=ann)
    obs = replace(observed(pol, h=carried, fc=FC), now=NOW + pd.Timedelta("30s"),
                  live=d.live_memory, guard=d.guard_memory, status=d.status,
                  query_load=(None, why))  # fmt: skip
    again = decide(obs)
    assert again.status == d.status and not again.status_changed and again.hpa_patch is None


def test_a_query_that_starts_failing_says_so_while_the_evidence_ages_out():
    d = run((2.4, None))
    why = f"{QUERY_FIELD}: returned 2 series; the query must return exactly one"
    obs = replace(observed(ON, h=hpa(), fc=FC), now=NOW + pd.Timedelta("30s"),
                  live=d.live_memory, status=d.status, query_load=(None, why))  # fmt: skip
    again = decide(obs)
    lc = again.status["liveCorrection"]
    assert lc["reason"] == "Active" and lc["message"].endswith(
        f"; last observation unusable: {why}")
    assert again.live_factor == pytest.approx(1.6)  # the EWMA's memory, not the failure


def test_a_low_query_load_never_takes_the_floor_below_the_value_plan():
    # 0.3 / 1.5 = ×0.2, clamped to min 0.5; the floor planned on the value (7) stays.
    d = run((0.3, None))
    assert d.live_factor == 0.5 and d.floor == 7


def test_the_guard_is_not_judged_on_a_failed_query_and_floors_follow_the_forecast():
    pol = policy(accuracyGuard={"enabled": True, "window": "10m"},
                 observedLoad={"prometheusQuery": Q})  # fmt: skip
    why = f"{QUERY_FIELD}: returned no data; check the metric name"
    d = run((None, why), pol=pol)
    cond = next(c for c in d.status["conditions"] if c["type"] == "ForecastAccurate")
    assert cond["status"] == "Unknown" and cond["reason"] == "NotJudged"
    assert cond["message"].startswith(why) and d.floor == 7


def test_the_guard_judges_the_query_load():
    # A steady 6.0 against a forecast of 1.5: WAPE |6 − 1.5| / 6 = 0.75 > 0.5, trips.
    pol = policy(accuracyGuard={"enabled": True, "window": "10m"},
                 observedLoad={"prometheusQuery": Q})  # fmt: skip
    d = run((6.0, None), pol=pol)
    cond = next(c for c in d.status["conditions"] if c["type"] == "ForecastAccurate")
    assert cond["reason"] == "ForecastInaccurate"
    assert d.accuracy_error == pytest.approx(0.75) and d.floor == 2  # the baseline


# --------------------------------------------------------- against a real Prometheus


def test_one_series_is_the_load(prometheus_server):
    h = prometheus_server.history
    now = pd.Timestamp.now(tz="UTC")
    got = fetch_instant(prometheus_server.url, STOREFRONT, at=now, timeout=10)
    # The reference is the float written into the OpenMetrics file (the last sample).
    assert got == h.values["storefront"][-1]
    total = fetch_instant(prometheus_server.url, "sum(last_over_time(demo_load[6h]))",
                          at=now, timeout=10)  # fmt: skip
    want = sum(h.values[s][-1] for s in ("storefront", "search", "reports"))
    assert total == pytest.approx(want, rel=1e-15)


@pytest.mark.parametrize(("query", "says"), [
    ("last_over_time(demo_load[6h])",
     "returned 3 series; the query must return exactly one — aggregate with sum()"),
    # The samples end hours ago: at now the plain selector has nothing within its 5m
    # look-back (Prometheus docs, "Querying basics", "Staleness").
    ('demo_load{service="storefront"}', "returned no data; check the metric name"),
    ("no_such_metric", "returned no data; check the metric name"),
    (f"{STOREFRONT} / 0", "returned +Inf; a load must be a finite number ≥ 0"),
    (f"-{STOREFRONT}", "a load must be a finite number ≥ 0"),
    ("sum(demo_load", "HTTP 400 bad_data"),
])  # fmt: skip
def test_bad_answers_from_the_real_server_are_clear(prometheus_server, query, says):
    with pytest.raises(PrometheusError) as e:
        fetch_instant(prometheus_server.url, query, at=pd.Timestamp.now(tz="UTC"), timeout=10)
    assert says in str(e.value) and str(e.value).startswith(prometheus_server.url)


def test_a_dead_server_is_a_message_within_the_timeout():
    from prometheus_server import free_port

    started = time.monotonic()
    with pytest.raises(PrometheusError, match="connection refused"):
        fetch_instant(f"http://127.0.0.1:{free_port()}", Q, at=NOW, timeout=2)
    assert time.monotonic() - started < 3


def _body(query: str) -> dict:
    spec = {"targetRef": {"name": "web"}, "forecast": {"configMapRef": {"name": "fc",
            "key": "forecast.json"}}, "capacity": {"perReplica": 1.0}, "leadTime": "15m",
            "holdTime": "0s", "headroom": 0, "mode": "Enforce",
            "liveCorrection": {**LC, "max": 10.0}, "observedLoad": {"prometheusQuery": query}}
    return {"apiVersion": "floorcast.dev/v1alpha1", "kind": "ForecastScalingPolicy",
            "metadata": {"name": "p", "namespace": "ns", "generation": 3}, "spec": spec}


def test_the_operator_corrects_by_the_real_servers_answer(prometheus_server):
    """``reconcile.observe`` asks the real server once; ``decide`` then corrects by it."""
    h = prometheus_server.history
    rt = Runtime(settings=Settings(prometheus_url=prometheus_server.url), api=None)
    obs = observe(rt, _body(STOREFRONT), deleting=False, configmaps=None, targets=None,
                  hpa=hpa(), forecast=FC)  # fmt: skip
    load = h.values["storefront"][-1]
    assert obs.query_load == (load, None)
    again = observe(rt, _body(STOREFRONT), deleting=False, configmaps=None, targets=None,
                    hpa=hpa(), forecast=FC)  # fmt: skip
    assert again.query_load == obs.query_load  # within --observe-interval: remembered
    mem, d = None, None
    for i in range(30):  # 15 minutes of 30 s reconciles on that reading
        now = NOW - (29 - i) * pd.Timedelta("30s")
        d = decide(replace(obs, now=now, live=mem, status=d.status if d else {}))
        mem = d.live_memory
    # Both EWMAs average constants, so the factor is load / forecast exactly; the
    # synthetic load is 1.77–4.23 against 1.5, so ×1.18 or more: never counted as 1.
    assert d.live_factor == pytest.approx(load / 1.5, rel=1e-9)
    assert d.floor == min(10, math.ceil(6.5 * load / 1.5))
    empty = observe(Runtime(settings=Settings(prometheus_url=prometheus_server.url), api=None),
                    _body("no_such_metric"), deleting=False, configmaps=None, targets=None,
                    hpa=hpa(), forecast=FC)  # fmt: skip
    assert empty.query_load[0] is None
    assert empty.query_load[1].startswith(f"{QUERY_FIELD}: returned no data; check")
    d = decide(replace(empty, now=NOW))  # the forecast's day; the answer is the server's
    assert d.status["liveCorrection"]["reason"] == "NoObservation"
    assert d.status["liveCorrection"]["message"] == empty.query_load[1] and d.floor == 7


@pytest.mark.parametrize("url", ["prometheus:9090", "http://user:pw@prom:9090", ""])
def test_a_bad_prometheus_url_is_refused_at_start(url, capsys):
    from cli_run import run as cli

    code, out, err = cli(["run", "--prometheus-url", url], capsys)
    assert code == 2 and out == ""
    assert err.startswith("floorcast: error: ") and "--prometheus-url" in err
