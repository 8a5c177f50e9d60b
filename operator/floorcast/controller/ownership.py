"""Whose minReplicas is on the HPA: the owner's baseline, or a floor this operator set.

The answer lives in annotations on the HPA itself (``floorcast.dev/baseline``,
``floorcast.dev/applied-floor``, ``floorcast.dev/policy``), so a restarted or crashed
operator reads it back instead of losing it, and a hand edit shows as a
``minReplicas`` that is not the floor last applied. The policy's ``status.baseline``
and ``status.floor`` are a second copy: when someone strips the annotations while a
floor is raised, the raised value would otherwise become the permanent baseline.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from floorcast.controller.state import (
    ANN_BASELINE,
    ANN_FLOOR,
    BASELINE_RECOVERED,
    OUR_ANNOTATIONS,
    Event,
    HpaPatch,
    HpaState,
)


def _int(value: object) -> int | None:
    try:
        n = int(str(value))
    except (TypeError, ValueError):
        return None
    return n if n >= 1 else None


@dataclass(frozen=True)
class Ownership:
    baseline: int
    managed: bool  # our annotations are on the HPA
    hand_edit: Event | None


def ownership(hpa: HpaState, status: Mapping[str, Any] | None = None) -> Ownership:
    """Where the owner's baseline is: our annotation, or the HPA's own minReplicas.

    A ``minReplicas`` that differs from the floor we last applied was set by someone
    else; their value becomes the baseline (the owner's latest word wins). With none of
    our annotations left, a ``minReplicas`` equal to the raised floor our status records
    (``status.floor`` above ``status.baseline``) is still ours, and the status's
    baseline is the owner's: anything else is the owner's own value.
    """
    ann = hpa.annotations or {}
    base, applied = _int(ann.get(ANN_BASELINE)), _int(ann.get(ANN_FLOOR))
    managed = any(k in ann for k in OUR_ANNOTATIONS)
    if not managed and status:
        sb, sf = _int(status.get("baseline")), _int(status.get("floor"))
        if sb is not None and sf is not None and sf > sb and hpa.min_replicas == sf:
            msg = (
                f"the floorcast.dev/* annotations on the HPA are gone while the floor "
                f"{sf} was raised; baseline {sb} recovered from status.baseline"
            )
            return Ownership(sb, True, Event("Normal", BASELINE_RECOVERED, msg))
    if base is None or applied is None:
        return Ownership(hpa.min_replicas, managed, None)
    if hpa.min_replicas != applied:
        msg = (
            f"minReplicas was changed to {hpa.min_replicas} outside floorcast (last applied "
            f"floor {applied}); adopting {hpa.min_replicas} as the new baseline (was {base})"
        )
        return Ownership(hpa.min_replicas, True, Event("Normal", "BaselineAdopted", msg))
    return Ownership(base, True, None)


def restore(o: Ownership, hpa: HpaState) -> HpaPatch | None:
    """Back to the owner's state: baseline in minReplicas, none of our annotations."""
    if not o.managed and hpa.min_replicas == o.baseline:
        return None
    drop = {k: None for k in OUR_ANNOTATIONS}
    return HpaPatch(o.baseline, drop, hpa.resource_version)
