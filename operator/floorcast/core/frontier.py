"""The obvious alternative to a floor: the same HPA alone at a lower target.

A platform engineer's first question about pre-scaling is "why not lower my HPA's
target utilization?". The back-test answers it by replaying the HPA alone at a
ladder of lower targets and finding, by interpolation, the target at which it
saturates as little as floorcast did; floorcast's replica-hour saving at that point
is the figure that says whether it is worth installing.

Saturation is physical: demand above what the ready pods can carry at 100 % of
their CPU (``metrics``' ``under_capacity_minutes``). Lowering the target does not
change a pod, only when the HPA adds one, so every ladder row keeps the pod's 100 %
capacity c = per_replica / target and carries per_replica' = c · target' at its own
target.

Why a row at target u' can be replayed with the base per_replica p and the demand
scaled by u / u' (``core.hpa_model.simulate`` takes one scalar per_replica for all
rows): the controller only ever sees the ratio load / (ready · per_replica), and
    D / (ready · p') = D / (ready · p · u'/u) = (D · u/u') / (ready · p),
so the scaled row makes every decision the real one would, and the same holds for
the initial count ceil(D / p'). Its saturation test must stay physical:
    D > ready · c = ready · p / u   <=>   D · u/u' > ready · p / u',
which is ``metrics``' test (scaled demand > ready · per_replica / target) with the
row's own target u'; utilization u' · D' / (ready · p) = D / (ready · c) is then
physical too. Replica-hours do not involve demand at all.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from floorcast.errors import InputError

#: Default ladder: from the base target down to this, in steps of LADDER_STEP (the
#: issue suggests 20 %; on bursty load the HPA alone still saturates more there).
LADDER_FLOOR = 0.10
LADDER_STEP = 0.05


def ladder(
    base: float, *, top: float | None = None, targets: Sequence[float] | None = None
) -> list[float]:
    """HPA targets (fractions) to replay the HPA alone at, highest first, base included.

    ``top`` raises the first rung above the base (a sweep that runs the HPA hotter
    may saturate more than the HPA alone at the base target; the equal-saturation
    point then lies above it). Explicit ``targets`` replace the default rungs.
    """
    if targets is not None:
        bad = [t for t in targets if not (0 < t <= 10) or not np.isfinite(t)]
        if bad:
            raise InputError(f"--ladder: targets must be in (0, 1000] %, got {bad[0]:.0%}")
        rungs = {round(float(t), 6) for t in targets}
    else:
        lo = min(LADDER_FLOOR, base)
        n = int(np.floor((base - lo) / LADDER_STEP + 1e-9))
        rungs = {round(base - i * LADDER_STEP, 6) for i in range(n + 1)} | {round(lo, 6)}
        if top is not None and top > base:
            n_up = int(np.ceil((top - base) / LADDER_STEP - 1e-9))
            rungs |= {round(min(base + i * LADDER_STEP, top), 6) for i in range(1, n_up + 1)}
    rungs |= {round(base, 6)}
    return sorted(rungs, reverse=True)


def demand_scale(base: float, targets: Sequence[float] | np.ndarray) -> np.ndarray:
    """Per-row demand multiplier u / u' that replays target u' at the base per_replica."""
    return base / np.asarray(targets, dtype=np.float64)


def equal_saturation(
    targets: Sequence[float],
    saturation: Sequence[float],
    replica_hours: Sequence[float],
    at: float,
) -> dict[str, Any]:
    """The HPA alone where it saturates ``at`` minutes, read off the ladder.

    Walks down from the highest target to the first rung that saturates no more than
    ``at`` and interpolates linearly (in saturation) between it and the rung above:
    the cheapest ladder setting that is as safe. ``found`` says how:
    ``interpolated``; ``top`` when even the highest rung saturates no more (the
    alternative costs no more than that rung); ``beyond_ladder`` when even the
    lowest rung saturates more (its figures are then a lower bound on the cost).
    """
    t = np.asarray(targets, dtype=np.float64)
    s = np.asarray(saturation, dtype=np.float64)
    rh = np.asarray(replica_hours, dtype=np.float64)
    if not (len(t) == len(s) == len(rh) >= 1) or np.any(np.diff(t) >= 0):
        raise ValueError("the ladder must be non-empty and strictly descending in target")
    if s[0] <= at:
        return _point("top", t[0], s[0], rh[0])
    for i in range(1, len(t)):
        if s[i] <= at:
            w = (s[i - 1] - at) / (s[i - 1] - s[i])
            return _point(
                "interpolated",
                t[i - 1] + w * (t[i] - t[i - 1]),
                at,
                rh[i - 1] + w * (rh[i] - rh[i - 1]),
            )
    return _point("beyond_ladder", t[-1], s[-1], rh[-1])


def _point(found: str, target: float, sat: float, rh: float) -> dict[str, Any]:
    return {
        "found": found,
        "target_utilization": float(target),
        "under_capacity_minutes": float(sat),
        "replica_hours": float(rh),
    }


def saving(replica_hours: float, alternative: dict[str, Any]) -> float | None:
    """1 − replica_hours / the alternative's: the share of the alternative's cost saved."""
    other = alternative["replica_hours"]
    return None if other <= 0 else float(1.0 - replica_hours / other)
