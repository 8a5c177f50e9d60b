"""``spec.observedLoad.prometheusQuery`` on a real API server: the CRD as shipped in
crds/ keeps the query (no pruning) and refuses what policy.py refuses at the bounds
(tests/test_crd.py holds the two together on paper; docs/policy.md, "Observed load
from Prometheus")."""

from __future__ import annotations

import pytest
from kubernetes.client.rest import ApiException

from e2e.test_policy_crd import crd_installed, create, policy  # noqa: F401 (fixture)
from floorcast.policy import PolicyError, parse_policy
from floorcast.policy_observe import MAX_QUERY_LENGTH

QUERY = 'sum(rate(http_requests_total{service="checkout"}[5m]))'


def test_the_query_survives_the_round_trip(crd_installed, api_client, namespace):  # noqa: F811
    got = create(api_client, namespace, policy("observed", observedLoad={"prometheusQuery": QUERY}))
    assert got["spec"]["observedLoad"] == {"prometheusQuery": QUERY}
    assert parse_policy(got, source="api").spec.observed_load.prometheus_query == QUERY


@pytest.mark.parametrize(("query", "says"), [
    ("", "should be at least 1 chars long"),
    ("x" * (MAX_QUERY_LENGTH + 1), f"may not be more than {MAX_QUERY_LENGTH} bytes"),
    (7, "must be of type string"),
])  # fmt: skip
def test_both_refuse_an_empty_or_overlong_query(crd_installed, api_client, namespace,  # noqa: F811
                                                query, says):  # fmt: skip
    obj = policy("bad-query", observedLoad={"prometheusQuery": query})
    with pytest.raises(ApiException) as e:
        create(api_client, namespace, obj)
    assert e.value.status == 422 and "spec.observedLoad.prometheusQuery" in e.value.body
    assert says in e.value.body, e.value.body
    with pytest.raises(PolicyError, match=r"spec\.observedLoad\.prometheusQuery"):
        parse_policy({**obj, "metadata": {"name": "bad-query", "namespace": namespace}})
