"""What the floor costs: replica-hours it added above what the HPA alone wanted, over
the last day (docs/policy.md, "Cost of the floor").

The HPA's own rule (Kubernetes documentation, "Horizontal Pod Autoscaling", algorithm
details): desiredReplicas = ceil(currentReplicas × currentMetricValue /
desiredMetricValue). With CPU utilization that is ceil(currentReplicas × current % /
target %), and it does not depend on how many replicas the floor added: the same
load spread over more pods shows a proportionally lower utilization. Alone, the HPA
would also keep its own minReplicas (the baseline) and maxReplicas, so the floor adds
max(0, floor − clamp(desired, baseline, max)) replicas while it is in force. (The
HPA's 10 % tolerance and its stabilization windows are left out: they decide *when*
the HPA alone would move, not what it wants; so the figure is what the floor adds
above the HPA's momentary want — an upper estimate of its cost.)

Time-weighted like the guard: each observation holds until the next, for at most
``MAX_HOLD_SECONDS``. The day is 96 quarter-hour buckets (``core.buckets``): the
figure covers the last 23 h 45 min to 24 h, in bounded memory (97 numbers a policy).
Pure numpy, vectorized over workloads; time is a parameter (seconds).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from floorcast.core import buckets

DAY_SECONDS = 86400.0
BUCKETS = 96
#: One observation counts for at most this long (common practice, no source): after
#: a longer pause nothing is known about what the floor added.
MAX_HOLD_SECONDS = 300.0


def hpa_alone(current_replicas: np.ndarray, utilization: np.ndarray, target: np.ndarray,
              *, baseline: np.ndarray, maximum: np.ndarray) -> np.ndarray:  # fmt: skip
    """The replicas the HPA would want without the floor, clamped to its own bounds;
    NaN where the HPA reports no utilization."""
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.asarray(utilization, dtype=np.float64) / np.asarray(target, dtype=np.float64)
        # The 1e-9 keeps 3 × 80 / 80 from rounding up to 4 in floats.
        want = np.ceil(np.asarray(current_replicas, dtype=np.float64) * ratio - 1e-9)
    return np.where(np.isfinite(want), np.clip(want, baseline, maximum), np.nan)


def added(floor: np.ndarray, alone: np.ndarray) -> np.ndarray:
    """Replicas the floor adds: max(0, floor − what the HPA alone wants); NaN unknown."""
    f = np.asarray(floor, dtype=np.float64)
    return np.where(np.isfinite(alone), np.maximum(f - alone, 0.0), np.nan)


@dataclass(frozen=True)
class State:
    ring: buckets.Ring  # K = 1: replica-seconds added
    last_at: np.ndarray  # (W,) seconds of the pending observation; NaN: none
    last: np.ndarray  # (W,) replicas it added; NaN: unknown (adds nothing)

    @staticmethod
    def empty(n: int, width: float = DAY_SECONDS / BUCKETS) -> State:
        return State(buckets.Ring.empty(n, BUCKETS, 1, width), np.full(n, np.nan),
                     np.full(n, np.nan))  # fmt: skip


def update(state: State, replicas_added: np.ndarray, now: np.ndarray | float,
           *, max_hold: float = MAX_HOLD_SECONDS) -> State:  # fmt: skip
    """Count the pending observation for the time it held, keep this one pending."""
    t = np.broadcast_to(np.asarray(now, dtype=np.float64), state.last_at.shape)
    seen = np.isfinite(state.last_at)
    dt = np.clip(np.where(seen, t - state.last_at, 0.0), 0.0, max_hold)
    vals = np.where(np.isfinite(state.last) & (dt > 0), dt * state.last, np.nan)[:, None]
    end = np.where(seen, np.minimum(t, state.last_at + max_hold), t)
    ring = buckets.add(state.ring, vals, end)
    new = np.asarray(replicas_added, dtype=np.float64) * np.ones_like(t)
    return State(ring, t.astype(np.float64).copy(), new)


def replica_hours(state: State, now: np.ndarray | float) -> np.ndarray:
    """(W,) replica-hours added over the day that ends at ``now``."""
    return buckets.total(state.ring, now)[:, 0] / 3600.0
