"""``spec.observedLoad``: where the operator reads the load it observes (docs/policy.md,
"Observed load from Prometheus").

Apart from ``policy.py`` to keep that file readable; the bound is the CRD's
(tests/test_crd.py holds the two together).
"""

from __future__ import annotations

from dataclasses import dataclass

from floorcast.policy_fields import _M, _Reader

#: A PromQL expression longer than this is a generated blob, not a query someone can
#: review in a policy; 4 KiB leaves room for a long label matcher list (common
#: practice, no source).
MAX_QUERY_LENGTH = 4096
QUERY_FIELD = "spec.observedLoad.prometheusQuery"


@dataclass(frozen=True)
class ObservedLoad:
    """``prometheus_query``: a PromQL instant query whose one series is the load now, in
    the forecast's unit; None reads the load from the HPA's status, as before."""

    prometheus_query: str | None = None


def read_observed_load(r: _Reader, s: _M) -> ObservedLoad:
    if s.get("observedLoad") is None:
        return ObservedLoad()
    o = r.child(s, p := "spec.observedLoad", ("prometheusQuery",))
    return ObservedLoad(prometheus_query=r.string(o, f"{p}.prometheusQuery", default=None,
                                                  max_length=MAX_QUERY_LENGTH))  # fmt: skip
