"""Fail safe, always: whatever goes wrong while handling one policy, its HPA gets the
owner's baseline back and the policy says why.

``decide`` already turns every *expected* problem (a bad forecast, a missing target)
into a restoring decision. This module covers the unexpected: a bug in parsing,
planning or deciding, or an API failure the reconcile cannot get past. Without it an
exception would leave the last raised floor in place and the status claiming
``FloorApplied`` while nothing reconciles any more (issue #14). The fallback is
deliberately simple — it reads only the HPA's annotations — so it has almost nothing
left that could fail in turn.
"""

from __future__ import annotations

from typing import Any

from floorcast.controller.conditions import APPLIED, READY, Condition, render
from floorcast.controller.decide import decide
from floorcast.controller.ownership import Ownership, ownership, restore
from floorcast.controller.state import (
    ANN_POLICY,
    BASELINE_RESTORED,
    RECONCILE_FAILED,
    STATUS_KEYS,
    Decision,
    Event,
    HpaPatch,
    HpaState,
    Observed,
)
from floorcast.timefmt import iso


def decide_safely(obs: Observed) -> Decision:
    """``decide``, or the fail-safe decision if it raises."""
    try:
        return decide(obs)
    except Exception as e:
        return fail_safe(obs, f"internal error while deciding ({type(e).__name__})")


def _own(hpa: HpaState, status: Any) -> Ownership | None:
    try:
        return ownership(hpa, status if isinstance(status, dict) else None)
    except Exception:
        return ownership(hpa)


def fail_safe(obs: Observed, why: str) -> Decision:
    """Restore the baseline if this policy raised the HPA, and say ``ReconcileFailed``.

    "This policy raised it" means our ``floorcast.dev/policy`` annotation names it (or
    the status copy of the baseline proves the floor is ours): an HPA another policy or
    nobody manages is left exactly as it is.
    """
    hpa, prev = obs.hpa, obs.status or {}
    own = _own(hpa, prev) if hpa.exists else None
    ours = own is not None and own.managed and hpa.annotations.get(ANN_POLICY) in (None, obs.name)
    patch: HpaPatch | None = restore(own, hpa) if ours and own is not None else None
    restored = f"; minReplicas restored to baseline {own.baseline}" if patch and own else ""
    events = [Event("Warning", RECONCILE_FAILED, why + restored)]
    if patch is not None and own is not None:
        events.append(Event("Normal", BASELINE_RESTORED, f"{why}; minReplicas restored to "
                                                         f"baseline {own.baseline}"))  # fmt: skip
    if obs.deleting:
        return Decision(patch, None, False, tuple(events), f"{obs.namespace}/{obs.name}: "
                        f"deleted; fail-safe: {why}")  # fmt: skip
    now_iso = iso(obs.now)
    applied = (f"baseline {own.baseline} in force" if own is not None
               else "no HPA write")  # fmt: skip
    conds = [Condition(READY, False, RECONCILE_FAILED, why),
             Condition(APPLIED, False, RECONCILE_FAILED, applied)]  # fmt: skip
    status: dict[str, Any] = {}
    if own is not None:
        status["baseline"] = own.baseline
    if patch is not None:
        status["floor"] = patch.min_replicas
    if obs.generation is not None:
        status["observedGeneration"] = obs.generation
    status["lastAppliedTime"] = now_iso if patch is not None else prev.get("lastAppliedTime")
    status = {k: v for k, v in status.items() if v is not None}
    status["conditions"] = render(conds, prev.get("conditions"), now_iso=now_iso,
                                  generation=obs.generation)  # fmt: skip
    current = {k: prev[k] for k in STATUS_KEYS if prev.get(k) is not None}
    return Decision(
        hpa_patch=patch,
        status=status,
        status_changed=status != current,
        events=tuple(events) if _ready_reason(prev) != RECONCILE_FAILED or patch else (),
        log=f"{obs.namespace}/{obs.name}: fail-safe: {why}; "
        + (f"patch minReplicas={patch.min_replicas}" if patch else "no HPA write"),
        baseline=own.baseline if own is not None else None,
    )


def _ready_reason(status: Any) -> str | None:
    for c in (status or {}).get("conditions") or []:
        if isinstance(c, dict) and c.get("type") == READY:
            return c.get("reason")
    return None
