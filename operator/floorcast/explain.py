"""Why the floor is what it is, in one line a person can check by hand.

docs/policy.md, "Why this floor": the floor rule (docs/policy.md, "The floor rule") is

    floor = clamp(ceil(load(t) × event(t) × (1 + headroom) × live / perReplica), lower, ceiling)

maximised over t in [now − holdTime, now + leadTime]. The line names the one instant t
whose need is the largest (the one that set the floor), the value read there (the
largest the interpolated forecast reaches in the grid step from t: each planning-grid
instant stands for the interval it starts) and what it was read from (``q0.95``,
``upper band`` or ``value``, on the planning grid), each factor, the un-rounded need,
the rounded replicas, and which bound clamped it. Pure: no I/O, no clock; used by the
operator's Events and status and by tests that recompute the floor from the line's
numbers alone.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from floorcast.core import planning
from floorcast.durations import format_duration
from floorcast.plans import FloorPlan, planning_label, policy_event_factors, refined_load
from floorcast.timefmt import iso


@dataclass(frozen=True)
class Explanation:
    """The numbers behind one floor; ``text()`` is the line users read."""

    at: pd.Timestamp  # the planning-grid instant whose need set the floor
    step: str  # the grid step: ``load`` is the largest load in [at, at + step)
    load: float  # the planning load there (``sized_on``), in the forecast's unit
    sized_on: str
    event: float
    headroom: float
    live: float | None  # the live correction's factor, when it acted
    per_replica: float
    need: float  # load × event × (1 + headroom) × live / perReplica, before rounding
    required: int  # the need rounded up
    floor: int
    bound: str | None  # what clamped ``required`` to ``floor``, or None
    unit: str = ""

    def text(self) -> str:
        u = f" {self.unit}" if self.unit else ""
        live = f" × live {_n(self.live)}" if self.live is not None else ""
        event = f" × event {_n(self.event)}" if self.event != 1.0 else ""
        line = (f"{self.sized_on} {_n(self.load)}{u} in the {self.step} from {iso(self.at)}"
                f"{event} × (1 + headroom {_n(self.headroom)}){live} / perReplica "
                f"{_n(self.per_replica)} = {_n(self.need)} → {self.required} replicas")  # fmt: skip
        if self.bound is not None:
            return f"{line}, {self.bound} → floor {self.floor}"
        return f"{line} → floor {self.floor}"


def _n(x: float | None) -> str:
    """Enough digits to redo the arithmetic (6 significant), no float noise."""
    return f"{float(x or 0.0):.6g}"


def explain(plan: FloorPlan, floor: int, *, live: float | None = None,
            keep: int | None = None) -> Explanation:  # fmt: skip
    """The explanation of ``floor`` (the plan's ``floor_now``, or the live-corrected
    floor with its factor ``live`` and the lowest floor the correction may reach,
    ``keep``)."""
    spec, s, b = plan.spec, plan.schedule, plan.bounds
    load = refined_load(spec, plan.forecast, s.step)
    times = pd.date_range(s.start, periods=len(load), freq=s.step)
    ev = policy_event_factors(spec, times)
    i = s.index_at(plan.at)
    lo = max(0, i - planning.window_steps(pd.Timedelta(spec.hold_time), s.step))
    hi = min(len(load), i + planning.window_steps(pd.Timedelta(spec.lead_time), s.step) + 1)
    raw = load[lo:hi] * ev[lo:hi]
    j = lo + int(np.argmax(raw))
    factor = 1.0 if live is None else live
    need = float(load[j] * ev[j] * (1.0 + spec.headroom) * factor / plan.per_replica)
    required = int(planning.ceil_replicas(np.array([need]))[0])
    bound = None
    if keep is not None and required < keep and keep == floor and keep > b.lower:
        bound = f"kept at {keep} (the floor planned on the forecast's value)"
    elif required < b.lower == floor:
        why = "baseline" if b.lower == b.baseline else "policy minReplicas"
        bound = f"raised to the lower bound {b.lower} ({why})"
    elif required > b.ceiling == floor:
        why = "HPA maxReplicas" if b.ceiling == b.hpa_max else "policy maxReplicas"
        bound = f"capped at {b.ceiling} ({why})"
    return Explanation(at=times[j], step=format_duration(s.step.to_pytimedelta()),
                       load=float(load[j]), sized_on=planning_label(spec, plan.forecast),
                       event=float(ev[j]), headroom=float(spec.headroom),
                       live=live, per_replica=float(plan.per_replica), need=need,
                       required=required, floor=floor, bound=bound,
                       unit=plan.forecast.unit or "")  # fmt: skip
