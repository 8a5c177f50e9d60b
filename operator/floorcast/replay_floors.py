"""Floors for every forecast × every back-test configuration, in one planner call.

Split from ``floorcast.replay`` (which decides what rows to replay) because this is
the part that must plan exactly as the operator does: the band the policy plans on
and its event factors come from ``floorcast.plans``, the rule from
``core.planning``. One difference is deliberate and documented (docs/backtest.md):
the forecast is read at the resolution the HPA acts on (``planning.refine``)
before the need is computed, so a rise between two forecast points is planned where
it happens rather than at the next whole step.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from datetime import timedelta

import numpy as np
import pandas as pd

from floorcast import plans
from floorcast.core import backtest as bt
from floorcast.core import planning
from floorcast.policy import PolicySpec


@dataclass(frozen=True)
class Knobs:
    """One floorcast configuration replayed: the policy's three planning settings and
    the HPA target it runs beside (a floor lets the HPA run hotter), and the
    ``serviceLevel`` it sizes on (None: the band rule, as a policy without one).
    ``max_error`` / ``max_exceedance``: the accuracy guard's thresholds for this row
    (``floorcast.replay_guard``); set, the row replays the guard even when the policy
    does not enable it, so thresholds can be picked from history first."""

    lead: timedelta
    headroom: float
    hold: timedelta
    target: float  # HPA target utilization of this row, fraction
    service_level: float | None = None
    max_error: float | None = None
    max_exceedance: float | None = None


def sized_loads(spec: PolicySpec, rolling: bt.Rolling, grid: Sequence[Knobs]) -> np.ndarray:
    """(J, G, H) the load each forecast's floor is sized on, per configuration: what
    ``plans.planning_load`` reads from the forecast as the operator would (its
    quantiles at the row's ``serviceLevel`` when it carries them, else the band rule).
    One pass per distinct service level."""
    out = np.empty((rolling.point.shape[0], len(grid), rolling.point.shape[1]))
    for level in {k.service_level for k in grid}:
        use = replace(spec, service_level=level)
        line = np.stack([plans.planning_load(use, rolling.forecast(j))
                         for j in range(len(rolling.times))])  # fmt: skip
        out[:, [g for g, k in enumerate(grid) if k.service_level == level]] = line[:, None, :]
    return out


def floors(
    spec: PolicySpec,
    rolling: bt.Rolling,
    grid: Sequence[Knobs],
    bounds: plans.Bounds,
    *,
    per_replica: float,
    base_target: float,
    plan_step: pd.Timedelta,
    oracle: bool = False,
) -> np.ndarray:
    """(J, G, H) floors on ``plan_step``: every forecast × every configuration.

    ``per_replica`` is the load a pod carries at ``base_target``; a row at another
    target carries per_replica · target / base_target (the pod's 100 % capacity is a
    fact, the target only says when the HPA adds one). The oracle plans on the load
    itself: no band, and no event factors (the real load already holds the event).
    Rows are index-based in the planner, so forecasts made at different times share
    one call.
    """
    j_n = rolling.point.shape[0]
    g_n = len(grid)
    if oracle:
        sized = np.repeat(np.asarray(rolling.point, dtype=np.float64), g_n, axis=0)
    else:
        sized = sized_loads(spec, rolling, grid).reshape(j_n * g_n, -1)
    load = planning.cover_intervals(  # (J*G, H), forecast-major
        planning.refine(sized, rolling.step, plan_step, centred=rolling.centred)
    )
    h = load.shape[1]
    factors: np.ndarray | float = 1.0
    if spec.planned_events and not oracle:
        f = np.stack(
            [
                plans.policy_event_factors(spec, pd.date_range(t, periods=h, freq=plan_step))
                for t in rolling.times
            ]
        )
        factors = np.repeat(f, g_n, axis=0)
    per = np.tile([per_replica * k.target / base_target for k in grid], j_n)
    sched = planning.plan(
        rolling.times[0],
        plan_step,
        load,
        per_replica=per,
        headroom=np.tile([float(k.headroom) for k in grid], j_n),
        lead=[pd.Timedelta(k.lead) for k in grid] * j_n,
        hold=[pd.Timedelta(k.hold) for k in grid] * j_n,
        lower=bounds.lower,
        ceiling=bounds.ceiling,
        event_factor=factors,
    )
    return sched.floor.reshape(j_n, g_n, h)


def plan_step_for(step: pd.Timedelta, wanted: pd.Timedelta) -> pd.Timedelta:
    """``wanted`` when it divides ``step``, else ``step`` itself (no refinement)."""
    ratio = pd.Timedelta(step) / pd.Timedelta(wanted)
    return pd.Timedelta(wanted) if ratio >= 1 and abs(ratio - round(ratio)) < 1e-9 else step
