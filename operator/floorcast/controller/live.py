"""The live level correction at reconcile time (docs/policy.md, "Live correction").

``decide`` plans the floor as before; this module turns the HPA's own status (or the
answer of the policy's ``observedLoad.prometheusQuery``, ``Observed.query_load``) into the
load it reports (current average CPU utilization / the HPA's target × current
replicas × perReplica: perReplica is the load one pod carries at the target), feeds it
to the EWMA in ``core.correction`` — the same function the back-test replays — and
sets the floor from the factor. No I/O and no clock: the EWMA's memory comes in with
``Observed.live`` and goes out with the ``Decision``, and the reconcile adapter keeps
it between reconciles (in memory: after a restart the evidence is gathered again,
and until then the plan stands uncorrected).

Safety: every problem with the observation leaves the plan's floor in force (the
factor is not used); the floor is never below the policy's lower bound nor, with a
factor below 1, below the floor planned on the forecast's value (``correction.KEEP``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from floorcast.controller.state import HpaState, LiveMemory, Observed
from floorcast.core import correction, planning
from floorcast.durations import format_duration
from floorcast.plans import FloorPlan, point_at, window_need

#: One observation never weighs more than this many seconds of the EWMA: after a
#: pause (a restart, a leader change) a single sample is not a half-life of evidence.
#: Twice the default reconcile interval (common practice, no source).
MAX_STEP_SECONDS = 60.0
#: The published factor moves only in steps this large, so a status is not rewritten
#: on every reconcile for noise (the metric carries the exact value).
PUBLISH_STEP = 0.05
ACTIVE, GATHERING, NO_OBSERVATION = "Active", "Gathering", "NoObservation"


@dataclass(frozen=True)
class Outcome:
    floor: int
    factor: float | None  # the factor in use, None when the plan stands uncorrected
    memory: LiveMemory | None
    status: dict[str, Any] | None
    note: str  # for Event text: "" or "; live correction ×1.12"
    #: The lowest floor the correction could reach (for the explanation), when it acted.
    keep: int | None = None


def observed_load(hpa: HpaState, per_replica: float) -> tuple[float | None, str | None]:
    """The load the HPA's status reports, or why it cannot be read."""
    if hpa.cpu_target_utilization is None or hpa.cpu_target_utilization <= 0:
        return None, ("the HPA has no CPU averageUtilization target, so its status "
                      "cannot be turned into load")  # fmt: skip
    if hpa.cpu_current_error:
        return None, hpa.cpu_current_error
    if hpa.cpu_current_utilization is None:
        return None, "the HPA reports no current CPU utilization yet (status.currentMetrics)"
    if not hpa.current_replicas:
        return None, "the HPA reports no current replicas (status.currentReplicas)"
    util = hpa.cpu_current_utilization / hpa.cpu_target_utilization
    return util * hpa.current_replicas * per_replica, None


def reading(obs: Observed, plan: FloorPlan) -> tuple[float, str | None]:
    """The sample the live correction and the accuracy guard feed their cores (NaN
    when there is none) and why it is unusable: the answer of the policy's
    ``observedLoad.prometheusQuery`` when it has one, else the HPA's status.

    Within leadTime of the HPA's last scale, new pods are counted in currentReplicas
    but not yet in the utilization average, so utilization × replicas would overstate
    and the HPA's reading is skipped; a query measures the load itself and is not."""
    if plan.spec.observed_load.prometheus_query is not None:
        load, why = obs.query_load or (None, "spec.observedLoad.prometheusQuery was not "
                                             "evaluated")  # fmt: skip
        return (np.nan if load is None else load), why
    load, why = observed_load(obs.hpa, plan.per_replica)
    last = obs.hpa.last_scale_time
    settling = last is not None and obs.now - last < pd.Timedelta(plan.spec.lead_time)
    return (np.nan if load is None or settling else load), why


def _published(prev: Any, f: float) -> float:
    old = prev.get("factor") if isinstance(prev, dict) else None
    if isinstance(old, int | float) and abs(old - f) < PUBLISH_STEP:
        return float(old)
    return round(f, 2)


def apply(obs: Observed, plan: FloorPlan) -> Outcome:
    """The floor with the live correction, its factor, the EWMA's new memory and the
    ``status.liveCorrection`` block; the plan's floor when the policy does not ask.

    A bug here must not cost the plan: the uncorrected floor stands and the status
    says the correction failed (the memory is kept as it was)."""
    if not plan.spec.live_correction.enabled:
        return Outcome(plan.floor_now, None, None, None, "")
    try:
        return _apply(obs, plan)
    except Exception as e:
        msg = f"the live correction failed ({type(e).__name__}); the plan stands uncorrected"
        status = {"factor": 1.0, "reason": NO_OBSERVATION, "message": msg}
        return Outcome(plan.floor_now, None, obs.live, status, "")


def _apply(obs: Observed, plan: FloorPlan) -> Outcome:
    lc = plan.spec.live_correction
    mem = obs.live
    state = correction.State.empty(1)
    if mem is not None:
        state = correction.State(np.array([mem.observed]), np.array([mem.forecast]),
                                 np.array([mem.weight]))  # fmt: skip
    dt = (obs.now - mem.at).total_seconds() if mem else MAX_STEP_SECONDS
    sample, why = reading(obs, plan)
    fc = point_at(plan)
    state = correction.update(state, np.array([sample]), np.array([fc]), dt,
                              pd.Timedelta(lc.half_life).total_seconds(),
                              max_step_seconds=MAX_STEP_SECONDS)  # fmt: skip
    memory = LiveMemory(float(state.observed[0]), float(state.forecast[0]),
                        float(state.weight[0]), obs.now)  # fmt: skip
    f = float(correction.factor(state, low=lc.low, high=lc.high, min_level=plan.per_replica)[0])
    prev = (obs.status or {}).get("liveCorrection")
    if np.isnan(f):
        reason = NO_OBSERVATION if why else GATHERING
        msg = why or (f"gathering evidence: the plan stands uncorrected until the HPA has "
                      f"reported load for about one halfLife ({_dur(lc.half_life)})")  # fmt: skip
        status = {"factor": 1.0, "reason": reason, "message": msg}
        return Outcome(plan.floor_now, None, memory, status, "")
    b = plan.bounds
    if correction.KEEP == "plan":
        keep = plan.floor_now
    elif correction.KEEP == "value":  # the floor planned on the forecast's value
        need = planning.ceil_replicas(np.array([window_need(plan, band=False)]))[0]
        keep = max(min(int(need), b.ceiling), b.lower)
    else:
        keep = b.lower
    fixed = correction.corrected_floor(
        np.array([plan.floor_now]), np.array([window_need(plan, band=True)]), np.array([f]),
        keep=np.array([keep]), lower=b.lower, ceiling=b.ceiling,
    )  # fmt: skip
    shown = _published(prev, f)
    msg = f"observed load ×{shown:.2f} the forecast (EWMA, halfLife {_dur(lc.half_life)})"
    if why:
        msg += f"; last observation unusable: {why}"
    status = {"factor": shown, "reason": ACTIVE, "message": msg}
    floor = int(fixed[0])
    note = f"; live correction ×{f:.2f}, plan {plan.floor_now}" if floor != plan.floor_now else ""
    return Outcome(floor, f, memory, status, note, keep)


def _dur(td: Any) -> str:
    return format_duration(pd.Timedelta(td).to_pytimedelta())
