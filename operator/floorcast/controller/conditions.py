"""Status conditions in the shape the Kubernetes API conventions prescribe.

Shape and rules follow the Kubernetes API conventions, "Typical status properties"
(community/contributors/devel/sig-architecture/api-conventions.md#typical-status-properties):
each condition has ``type``, ``status`` ("True"/"False"/"Unknown"), a CamelCase
``reason``, a human ``message``, ``observedGeneration`` and ``lastTransitionTime``,
which changes only when ``status`` changes. Keeping the old time when nothing moved
is also what makes a second reconcile produce an identical status, so no write.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

READY, FORECAST_AVAILABLE, APPLIED = "Ready", "ForecastAvailable", "Applied"
FORECAST_ACCURATE, LEAD_TIME_MEASURED = "ForecastAccurate", "LeadTimeMeasured"
ORDER = (READY, FORECAST_AVAILABLE, FORECAST_ACCURATE, LEAD_TIME_MEASURED, APPLIED)


@dataclass(frozen=True)
class Condition:
    type: str
    status: bool | None  # None: "Unknown"
    reason: str
    message: str


def render(
    wanted: Sequence[Condition],
    previous: Sequence[Mapping[str, Any]] | None,
    *,
    now_iso: str,
    generation: int | None,
) -> list[dict[str, Any]]:
    """The conditions list to store: ``lastTransitionTime`` kept unless status flipped."""
    old = {c.get("type"): c for c in previous or [] if isinstance(c, Mapping)}
    out: list[dict[str, Any]] = []
    for c in sorted(wanted, key=lambda c: ORDER.index(c.type) if c.type in ORDER else 99):
        status = "Unknown" if c.status is None else "True" if c.status else "False"
        before = old.get(c.type)
        since = now_iso
        if before is not None and before.get("status") == status:
            since = before.get("lastTransitionTime") or now_iso
        item: dict[str, Any] = {
            "type": c.type,
            "status": status,
            "reason": c.reason,
            "message": c.message,
            "lastTransitionTime": since,
        }
        if generation is not None:
            item["observedGeneration"] = generation
        out.append(item)
    return out
