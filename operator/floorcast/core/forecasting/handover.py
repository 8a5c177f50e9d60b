"""Hand-over from an older forecast to a newer one without a jump in the floor.

A new forecast usually disagrees a little with the one it replaces about the next
hour. Switching outright would move the replica floor in one step that neither
forecast predicted at any instant. Instead the two are cross-faded over an overlap
with linear weights on the new forecast's grid: at the new forecast's first instant
the result is the old value, after the overlap it is the new one, and in between it
is a convex combination, so every value lies between what the two said for that
instant. Bands are blended with the same weights, which keeps lower ≤ value ≤ upper.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd

from floorcast.core.series import Series
from floorcast.errors import InputError


def ramp(length: int, overlap: int) -> np.ndarray:
    """Weight of the new forecast at each of ``length`` steps: 0, 1/L, ..., 1 (L = overlap)."""
    if overlap <= 0:
        return np.ones(length)
    return np.clip(np.arange(length) / overlap, 0.0, 1.0)


def blend(old: np.ndarray, new: np.ndarray, weight: np.ndarray) -> np.ndarray:
    """(1 − w)·old + w·new, exact at w = 0 and w = 1 (no rounding drift at the ends)."""
    o, nw, w = (np.asarray(a, dtype=np.float64) for a in (old, new, weight))
    out = o + w * (nw - o)
    out = np.where(w >= 1, nw, out)
    # Guard the convex-combination property against float rounding.
    return np.clip(out, np.minimum(o, nw), np.maximum(o, nw))


def _overlap_steps(overlap: Any, step: pd.Timedelta) -> int:
    if isinstance(overlap, int | np.integer) and not isinstance(overlap, bool):
        n = int(overlap)
    else:
        n = int(np.ceil(pd.Timedelta(overlap) / step))
    if n < 0:
        raise InputError(f"hand-over overlap must not be negative, got {overlap!r}")
    return n


def crossfade(old: Series | None, new: Series, *, overlap: Any) -> Series:
    """The forecast to use from ``new.start`` on: ``new``, eased in from ``old``.

    ``overlap`` is a duration or a number of steps. The old forecast is read on the
    new grid (linear interpolation if the grids differ). If it does not cover the new
    forecast's first instant there is nothing to hand over from and ``new`` is
    returned; if it ends within the overlap, the ramp is shortened to end where the
    old forecast does, so the switch is still gradual.
    """
    if old is None or not len(old) or not len(new):
        return new
    k = _overlap_steps(overlap, new.step)
    t_new = new.times.asi8
    t_old = old.times.asi8
    covered = (t_new >= t_old[0]) & (t_new <= t_old[-1])
    if not covered[0] or k == 0:
        return new
    shared = int(np.argmin(covered)) if not covered.all() else len(new)  # leading run
    ramp_len = min(k, shared - 1)
    if ramp_len <= 0:
        return new
    span = ramp_len + 1
    w = ramp(span, ramp_len)

    def old_on_grid(a: np.ndarray) -> np.ndarray:
        # np.interp returns the knot values exactly, so a shared grid reads them as is.
        return np.interp(t_new[:span], t_old, np.asarray(a, dtype=np.float64))

    values = np.array(new.values, dtype=np.float64)
    values[:span] = blend(old_on_grid(old.values), values[:span], w)
    lower = upper = None
    if new.lower is not None:
        o_lo = old.lower if old.lower is not None else old.values
        o_hi = old.upper if old.upper is not None else old.values
        lower = np.array(new.lower, dtype=np.float64)
        upper = np.array(new.upper, dtype=np.float64)
        lower[:span] = np.minimum(blend(old_on_grid(o_lo), lower[:span], w), values[:span])
        upper[:span] = np.maximum(blend(old_on_grid(o_hi), upper[:span], w), values[:span])
    meta = dict(new.meta)
    meta["handover"] = {
        "overlap_steps": int(ramp_len),
        "from_generated": None if old.generated is None else old.generated.isoformat(),
    }
    return replace(new, values=values, lower=lower, upper=upper, meta=meta)
