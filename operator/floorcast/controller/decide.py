"""The reconcile decision: observed state in, the writes that should happen out.

Everything the operator decides lives here, with no I/O and no clock (``now`` is a
field), so every case the operator must get right — raise, lower back, dry-run,
stale/invalid/missing forecasts, a missing target, a conflict, a hand edit, deletion —
is a table-driven unit test rather than a cluster experiment. The adapters only
observe and then carry out the ``Decision``.

Safety rule (docs/operations.md): the HPA is never left worse than it was found. Every
failure path either leaves it untouched or restores the owner's baseline, and no path
writes a ``minReplicas`` below the baseline. The baseline and the last applied floor
live in annotations on the HPA, so they survive an operator restart or crash.
Restoring is always allowed, also under operator-wide ``--dry-run``: dry-run stops
floorcast from *raising* floors, never from undoing one it raised before.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from floorcast.controller import accuracy, live
from floorcast.controller.checks import MAX_CLOCK_SKEW, explanation, forecast_problem, recorded  # noqa: F401
from floorcast.controller.checks import peak as peak_at
from floorcast.controller.conditions import APPLIED, FORECAST_AVAILABLE, READY, Condition, render
from floorcast.controller.ownership import Ownership, ownership, restore
from floorcast.controller.state import (  # noqa: F401  (re-exported)
    ANN_BASELINE,
    ANN_FLOOR,
    ANN_POLICY,
    ANNOTATION_PREFIX,
    BASELINE_RESTORED,
    CAPACITY_UNKNOWN,
    DRY_RUN,
    FLOOR_APPLIED,
    FORECAST_INVALID,
    FORECAST_MISSING,
    FORECAST_OK,
    FORECAST_STALE,
    OUR_ANNOTATIONS,
    POLICY_INVALID,
    STATUS_KEYS,
    TARGET_CONFLICT,
    TARGET_NOT_FOUND,
    URL_NOT_ALLOWED,
    Decision,
    Event,
    ForecastState,
    HpaPatch,
    HpaState,
    Observed,
)
from floorcast.errors import InputError
from floorcast.plans import plan_policy, service_level_fallback
from floorcast.timefmt import iso


def decide(obs: Observed) -> Decision:
    """The one reconcile decision; see the module docstring for the rules."""
    prev = obs.status or {}
    ref = f"{obs.namespace}/{obs.name}"
    hpa = obs.hpa
    mine = hpa.annotations.get(ANN_POLICY) in (None, obs.name)
    own = ownership(hpa, prev) if hpa.exists else None

    if obs.deleting:
        patch = restore(own, hpa) if own and mine else None
        evs = (
            (
                Event(
                    "Normal",
                    BASELINE_RESTORED,
                    f"policy deleted; minReplicas restored to {own.baseline}",
                ),
            )
            if patch and own
            else ()
        )
        return Decision(patch, None, False, evs, f"{ref}: deleted; " + _said(patch))

    policy = obs.policy
    if policy is None or obs.policy_error:
        # An edit that breaks a policy must not strand the floor it had raised: restore
        # the HPA it names, but only if our annotations say this policy raised it.
        ours = own is not None and hpa.annotations.get(ANN_POLICY) == obs.name
        patch = restore(own, hpa) if ours and own else None
        why = obs.policy_error or "invalid"
        evs = (
            [Event("Warning", POLICY_INVALID, why)] if _ready_reason(prev) != POLICY_INVALID else []
        )
        if patch is not None and own is not None:
            msg = f"policy invalid; minReplicas restored to {own.baseline}"
            evs.append(Event("Normal", BASELINE_RESTORED, msg))
        return _finish(
            obs,
            patch,
            [_c(READY, False, POLICY_INVALID, why)],
            None,
            evs,
            f"{ref}: invalid policy; " + _said(patch),
            own=own,
        )
    if obs.conflict_with:
        msg = (
            f"HorizontalPodAutoscaler {policy.spec.target_name} is already targeted by "
            f"policy {obs.conflict_with}, created earlier; this policy writes nothing"
        )
        return _finish(
            obs,
            None,
            [_c(READY, False, TARGET_CONFLICT, msg), _c(APPLIED, False, TARGET_CONFLICT, msg)],
            None,
            (),
            f"{ref}: conflict with {obs.conflict_with}",
        )
    if not hpa.exists or own is None:
        msg = f"HorizontalPodAutoscaler {obs.namespace}/{policy.spec.target_name} not found"
        return _finish(
            obs,
            None,
            [_c(READY, False, TARGET_NOT_FOUND, msg), _c(APPLIED, False, TARGET_NOT_FOUND, msg)],
            None,
            (),
            f"{ref}: target missing",
        )

    events: list[Event] = []
    dry = obs.operator_dry_run or policy.spec.mode == "DryRun"
    series = obs.forecast.series
    age = (obs.now - series.generated).total_seconds() if series and series.generated else None
    problem = forecast_problem(obs, policy)
    plan = None
    if problem is None:
        if obs.per_replica_error:
            problem = (CAPACITY_UNKNOWN, obs.per_replica_error)
        else:
            try:
                assert series is not None
                plan = plan_policy(
                    policy.spec,
                    series,
                    baseline=own.baseline,
                    hpa_max=hpa.max_replicas,
                    at=obs.now,
                    per_replica=obs.per_replica,
                )
            except InputError as e:
                stale = "before now" in str(e)
                problem = (FORECAST_STALE if stale else FORECAST_INVALID, str(e))
            except Exception as e:  # a bug must not strand a floor: fall back, say why
                problem = (FORECAST_INVALID, f"the floor could not be planned from this "
                                             f"forecast ({type(e).__name__})")  # fmt: skip
    extra: dict[str, Any] = {"baseline": own.baseline}
    if series is not None and series.generated is not None:
        extra["forecastGenerated"] = iso(series.generated)

    if plan is None:
        assert problem is not None
        reason, msg = problem
        patch = restore(own, hpa)  # DryRun and --dry-run too: never strand a floor
        if patch is not None:
            events.append(
                Event(
                    "Normal",
                    BASELINE_RESTORED,
                    f"{msg}; minReplicas restored to baseline {own.baseline}",
                )
            )
        # The same words whether or not this run restored (an Event says when it did),
        # so the next run finds the status unchanged.
        applied_reason = DRY_RUN if dry else BASELINE_RESTORED
        applied_msg = (
            f"dry run: the HPA keeps its baseline {own.baseline}"
            if dry
            else f"baseline {own.baseline} in force"
        )
        if not dry:
            extra["floor"] = own.baseline
        conds = [
            _c(READY, False, reason, msg),
            _c(FORECAST_AVAILABLE, False, reason, msg),
            _c(APPLIED, False, applied_reason, applied_msg),
        ]
        if _ready_reason(prev) != reason:
            events.append(Event("Warning", reason, msg))
        return _finish(
            obs,
            patch,
            conds,
            extra,
            events,
            f"{ref}: {reason}: {msg}; " + _said(patch),
            own=own,
            age=age,
        )

    corrected = live.apply(obs, plan)  # the plan's floor unless liveCorrection acts
    guarded = accuracy.apply(obs, plan, corrected)  # the baseline while the guard trips
    floor = guarded.floor
    events.extend(guarded.events)
    if corrected.status is not None:
        extra["liveCorrection"] = corrected.status
    if guarded.status is not None:
        extra["accuracy"] = guarded.status
    if guarded.added_hours is not None:
        extra["addedReplicaHours"] = accuracy.published_cost(prev, guarded.added_hours)
    fc_acc = [guarded.condition] if guarded.condition is not None else []
    nxt = plan.next_change
    if nxt is not None:
        extra["nextChange"] = {"at": iso(nxt.at), "replicas": nxt.new}
    peak = iso(peak_at(plan, obs.now))
    why_text = explanation(plan, corrected, guarded)
    why = f"; why: {why_text}" if why_text else ""
    note = f"; {obs.forecast.note}" if obs.forecast.note else ""
    note += f"; {fb}" if (fb := service_level_fallback(plan.spec, plan.forecast)) else ""
    fc_ok = _c(FORECAST_AVAILABLE, True, FORECAST_OK, f"forecast until {iso(series.end)}{note}")
    if dry:
        patch = restore(own, hpa)  # switching to DryRun (or --dry-run) restores
        if patch is not None:
            events.append(
                Event(
                    "Normal",
                    BASELINE_RESTORED,
                    f"dry run: minReplicas restored to baseline {own.baseline}",
                )
            )
        current = own.baseline if patch else hpa.min_replicas
        extra["proposedFloor"] = floor
        extra["explanation"] = recorded(prev, "proposedFloor", floor, why_text)
        said = (
            f"would set minReplicas {current} → {floor} (peak at {peak}{corrected.note})"
            if floor != current
            else f"would keep minReplicas at {current}"
        )
        if prev.get("proposedFloor") != floor:
            events.append(Event("Normal", DRY_RUN, said + why))
        why = "operator-wide --dry-run" if obs.operator_dry_run else "mode: DryRun"
        conds = [
            _c(READY, True, DRY_RUN, f"{why}; proposed floor {floor}"),
            fc_ok,
            *fc_acc,
            _c(APPLIED, False, DRY_RUN, f"{why}: no write to the HPA"),
        ]
        return _finish(
            obs,
            patch,
            conds,
            extra,
            events,
            f"{ref}: DryRun {said}",
            own=own,
            floor=floor,
            age=age,
            corrected=corrected,
            guarded=guarded,
        )

    extra["floor"] = floor
    extra["explanation"] = recorded(prev, "floor", floor, why_text)
    if floor > own.baseline:
        want = {ANN_BASELINE: str(own.baseline), ANN_FLOOR: str(floor), ANN_POLICY: obs.name}
        same = all(hpa.annotations.get(k) == v for k, v in want.items())
        patch = (
            None
            if same and hpa.min_replicas == floor
            else HpaPatch(floor, want, hpa.resource_version)
        )
    else:
        patch = restore(own, hpa)  # at the baseline: leave the HPA as its owner had it
    if hpa.min_replicas != floor:
        verb = "raised" if floor > hpa.min_replicas else "lowered"
        why_change = (f" (peak at {peak}{corrected.note})" if floor > hpa.min_replicas
                      else f" (baseline {own.baseline}{corrected.note})")  # fmt: skip
        events.append(
            Event(
                "Normal",
                "Floor" + verb.capitalize(),
                f"{verb} minReplicas {hpa.min_replicas} → {floor}{why_change}{why}",
            )
        )
    msg = f"floor {floor} (baseline {own.baseline}) in force"
    conds = [_c(READY, True, FLOOR_APPLIED, msg), fc_ok, *fc_acc,
             _c(APPLIED, True, FLOOR_APPLIED, msg)]
    return _finish(
        obs,
        patch,
        conds,
        extra,
        events,
        f"{ref}: Enforce {msg}; " + _said(patch),
        own=own,
        floor=floor,
        age=age,
        corrected=corrected,
        guarded=guarded,
    )


def _c(type_: str, ok: bool, reason: str, message: str) -> Condition:
    return Condition(type_, ok, reason, message)


def _said(patch: HpaPatch | None) -> str:
    return f"patch minReplicas={patch.min_replicas}" if patch else "no HPA write"


def _ready_reason(status: Mapping[str, Any]) -> str | None:
    for c in status.get("conditions") or []:
        if isinstance(c, Mapping) and c.get("type") == READY:
            return c.get("reason")
    return None


def _finish(
    obs: Observed,
    patch: HpaPatch | None,
    conds: list[Condition],
    extra: Mapping[str, Any] | None,
    events: Any,
    log: str,
    *,
    own: Ownership | None = None,
    floor: int | None = None,
    age: float | None = None,
    corrected: live.Outcome | None = None,
    guarded: accuracy.Result | None = None,
) -> Decision:
    prev = obs.status or {}
    baseline = own.baseline if own is not None else None
    # A hand edit is adopted as the baseline. When this decision writes the HPA, our
    # annotations record it and the next run sees no edit; when it does not (dry run),
    # the edit stays visible, so say so only while the baseline is news.
    edit = own.hand_edit if own is not None else None
    if edit is not None and (patch is not None or prev.get("baseline") != baseline):
        events = [edit, *events]
    now_iso = iso(obs.now)
    status: dict[str, Any] = {k: v for k, v in (extra or {}).items() if v is not None}
    if obs.lead is not None:  # leadTime: auto (controller/leadtime.py)
        status["leadTime"] = obs.lead.status
        conds = [*conds, obs.lead.condition]
    if obs.generation is not None:
        status["observedGeneration"] = obs.generation
    if patch is not None:
        status["lastAppliedTime"] = now_iso
    elif prev.get("lastAppliedTime"):
        status["lastAppliedTime"] = prev["lastAppliedTime"]
    status["conditions"] = render(
        conds, prev.get("conditions"), now_iso=now_iso, generation=obs.generation
    )
    current = {k: prev[k] for k in STATUS_KEYS if prev.get(k) is not None}
    return Decision(
        hpa_patch=patch,
        status=status,
        status_changed=status != current,
        events=tuple(events),
        log=log,
        floor=floor,
        baseline=baseline,
        forecast_age_seconds=age,
        live_factor=corrected.factor if corrected is not None else None,
        # No plan this time: the EWMA's memory stays as it was (it ages by time).
        live_memory=corrected.memory if corrected is not None else obs.live,
        accuracy_error=guarded.error if guarded is not None else None,
        added_replica_hours=guarded.added_hours if guarded is not None else None,
        guard_memory=guarded.memory if guarded is not None else obs.guard,
    )


def conflict_winner(me: tuple[str, str], rivals: list[tuple[str, str]]) -> str | None:
    """The earlier policy on the same HPA, if any: ordered by (creationTimestamp, name).

    RFC 3339 UTC timestamps from the API server sort as text. ``me`` and ``rivals``
    are ``(creationTimestamp, name)``; ``None`` means this policy is the one that acts.
    """
    first = min([me, *rivals])
    return None if first == me else first[1]
