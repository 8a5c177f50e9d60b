"""``capacity.fromHPA: true``: per-replica capacity from the HPA's own CPU target.

The HPA keeps average CPU utilization near its target, measured against the pods' CPU
requests (Kubernetes docs, "Horizontal Pod Autoscaling" > "Algorithm details" and
"Support for resource metrics": utilization is a percentage of the sum of the
containers' requests, and the HPA does not act when a container has no request). So
the load one replica carries at the HPA's set point is

    perReplica (cores) = sum of container CPU requests × averageUtilization / 100

which is the same unit as a forecast in cores. Pure functions: the adapter reads the
HPA and the workload, this decides, and every failure is a message for the
``CapacityUnknown`` condition rather than a guess.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from decimal import Decimal, InvalidOperation
from typing import Any

from floorcast.controller.state import HpaState

#: Quantity suffixes (Kubernetes docs, "Resource units in Kubernetes" and the
#: apimachinery ``resource.Quantity`` format: decimal SI, binary SI, or an exponent).
_DECIMAL = {"n": -9, "u": -6, "m": -3, "": 0, "k": 3, "M": 6, "G": 9, "T": 12, "P": 15, "E": 18}
_BINARY = {"Ki": 10, "Mi": 20, "Gi": 30, "Ti": 40, "Pi": 50, "Ei": 60}
_QUANTITY = re.compile(
    r"^([+-]?(?:\d+\.?\d*|\.\d+))(?:([eE][+-]?\d+)|(Ki|Mi|Gi|Ti|Pi|Ei|[numkMGTPE])?)$"
)
SUPPORTED_KINDS = ("Deployment", "StatefulSet")


def cpu_cores(quantity: object) -> float:
    """A CPU quantity ("500m", "2", "0.25", "1e3") in cores; ValueError if it is not one."""
    text = str(quantity).strip()
    m = _QUANTITY.match(text)
    if not m:
        raise ValueError(f"not a Kubernetes quantity: {text!r}")
    number, exponent, suffix = m.groups()
    try:
        value = Decimal(number)
    except InvalidOperation:
        raise ValueError(f"not a Kubernetes quantity: {text!r}") from None
    if exponent:
        value = value.scaleb(int(exponent[1:]))
    elif suffix in _BINARY:
        value *= 2 ** _BINARY[suffix]
    else:
        value = value.scaleb(_DECIMAL[suffix or ""])
    return float(value)


def requested_cpu(pod_spec: Mapping[str, Any]) -> tuple[float | None, str | None]:
    """Sum of the containers' CPU requests in cores, or why it cannot be summed.

    Init containers are not counted: they are not running while the pod serves load.
    A container without a CPU request makes utilization undefined for the HPA too.
    """
    total = 0.0
    containers = pod_spec.get("containers") or []
    if not containers:
        return None, "the pod template has no containers"
    for c in containers:
        name = c.get("name", "?")
        req = ((c.get("resources") or {}).get("requests") or {}).get("cpu")
        if req is None:
            return None, f"container {name!r} has no CPU request"
        try:
            total += cpu_cores(req)
        except ValueError as e:
            return None, f"container {name!r}: {e}"
    if total <= 0:
        return None, "the containers' CPU requests add up to 0"
    return total, None


def per_replica_from_hpa(
    hpa: HpaState, pod_spec: Mapping[str, Any] | None
) -> tuple[float | None, str | None]:
    """(cores per replica, None) or (None, the reason for the CapacityUnknown condition)."""
    if hpa.cpu_target_utilization is None:
        return None, (
            "capacity.fromHPA: the HPA has no CPU metric with target type Utilization "
            "(averageUtilization); set capacity.perReplica instead"
        )
    kind, name = hpa.scale_target[1:] if hpa.scale_target else ("?", "?")
    if pod_spec is None:
        return None, f"capacity.fromHPA: the HPA's scale target {kind} {name} was not found"
    cores, why = requested_cpu(pod_spec)
    if cores is None:
        return None, f"capacity.fromHPA: {kind} {name}: {why}"
    return cores * hpa.cpu_target_utilization / 100, None
