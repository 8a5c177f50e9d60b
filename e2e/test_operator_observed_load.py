"""A real `floorcast run` reading ``observedLoad.prometheusQuery`` from a real
Prometheus (tests/prometheus_server.py: backfilled ``demo_load`` whose exact values
the harness knows) on the real API server (docs/policy.md, "Observed load from
Prometheus").

The HPAs have a CPU target but no metrics-server answers them, so their status holds
no load: whatever the live correction does here comes from the query. One policy's
query returns one series (the factor is its value over the forecast's 1.5); the
other's returns no data (NoObservation, the plan's floor 7 stands).
"""

from __future__ import annotations

import numpy as np

from e2e.operator_env import Env, forecast_json, policy_body
from floorcast.core.planning import ceil_replicas

STOREFRONT = 'last_over_time(demo_load{service="storefront"}[6h])'
FIELD = "spec.observedLoad.prometheusQuery"


def _policy(name: str, query: str) -> dict:
    body = policy_body(name, target=name)
    body["spec"]["liveCorrection"] = {"enabled": True, "halfLife": "10s", "max": 10}
    body["spec"]["observedLoad"] = {"prometheusQuery": query}
    return body


def _live(env: Env, name: str) -> dict:
    return (env.policy(name).get("status") or {}).get("liveCorrection") or {}


def test_the_operator_corrects_by_the_query_and_falls_back_on_no_data(env: Env) -> None:
    from prometheus_server import running_server

    with running_server() as prom:
        load = prom.history.values["storefront"][-1]
        env.create_workload("web")
        env.create_workload("api")
        env.put_forecast(forecast_json())
        env.start_operator("--prometheus-url", prom.url, "--observe-interval", "2s")
        env.create_policy(_policy("web", STOREFRONT))
        env.create_policy(_policy("api", "no_such_metric"))
        # Both EWMAs average constants, so the factor is load / 1.5 exactly; published
        # rounded to 0.01 (docs/policy.md, "Live correction").
        env.wait(lambda: _live(env, "web").get("reason") == "Active", "web Active", timeout=90)
        factor = load / 1.5
        assert _live(env, "web")["factor"] == round(factor, 2)
        want = min(10, int(ceil_replicas(np.array([6.5 * factor]))[0]))  # peak 6.5 × f
        env.wait(lambda: env.hpa("web").spec.min_replicas == want, f"web floor {want}",
                 timeout=30)  # fmt: skip
        env.wait(lambda: _live(env, "api").get("reason") == "NoObservation", "api NoObservation")
        msg = _live(env, "api")["message"]
        assert msg.startswith(f"{FIELD}: returned no data; check the metric name"), msg
        env.wait(lambda: env.hpa("api").spec.min_replicas == 7, "api floor 7, the plan's",
                 timeout=30)  # fmt: skip
