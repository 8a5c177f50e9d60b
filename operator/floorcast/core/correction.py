"""Live level correction: scale the stored forecast by how far the observed load is
from it, for the next lead + hold window only (docs/policy.md, "Live correction").

Day-ahead forecasts are wrong mostly in level (a busier day than the week before),
and the lead window is only minutes, so the load observed now says more about the
next minutes' level than the forecast made yesterday. The estimate is a ratio of two
exponentially weighted moving averages (EWMA) — observed load over forecast load,
weighted alike — rather than an EWMA of per-instant ratios: at night a forecast near
zero would make single ratios explode, while the ratio of the averages weighs each
instant by its load. It is clamped, and used only with enough evidence (observed for
at least ``min_evidence`` of the weight a long run would have, and an average
forecast of at least ``min_level``).

One update rule serves the operator (one step per reconcile, irregular ``dt``) and the
back-test (``track``: the same step over a series), so both compute the same factor
from the same observations. Pure numpy, vectorized over workloads; no clock.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from floorcast.core import planning

#: What a factor below 1 may lower the floor to (docs/policy.md, "Live correction"):
#: "plan" — never below the uncorrected plan (a correction only raises); "value" —
#: down to the floor planned on the forecast's value without its upper band; "lower"
#: — down to the policy's lower bound. The bounds always hold.
KEEP_RULES = ("plan", "value", "lower")
KEEP = "value"

#: Factors within this of 1 are 1: a level error of a few per cent is noise the
#: headroom already covers, and ceil(1.01 × 20.0) would add a replica to every need
#: that happens to be a whole number (common practice, no source; measured in
#: docs/backtest.md).
DEADBAND = 0.05

#: Evidence needed before a factor is used: the observations' share of the weight a
#: series observed forever would have. 0.5 is one half-life of observations
#: (common practice, no source).
MIN_EVIDENCE = 0.5


@dataclass(frozen=True)
class State:
    """Per workload: EWMA sums of observed and forecast load and of their weights.

    The sums are not normalized: ``observed / weight`` is the EWMA mean. Kept apart so
    that a missing observation can age the evidence without changing the ratio.
    """

    observed: np.ndarray  # (W,)
    forecast: np.ndarray  # (W,)
    weight: np.ndarray  # (W,), in [0, 1)

    @staticmethod
    def empty(n: int) -> State:
        z = np.zeros(n, dtype=np.float64)
        return State(z, z.copy(), z.copy())


def update(
    state: State,
    observed: np.ndarray,
    forecast: np.ndarray,
    dt_seconds: np.ndarray | float,
    half_life_seconds: np.ndarray | float,
    *,
    max_step_seconds: float = np.inf,
) -> State:
    """One EWMA step: decay what is known by 2^(−dt / half-life), then add the new
    observation with weight 1 − 2^(−min(dt, max_step) / half-life).

    A NaN (or negative) observation or forecast adds nothing, so the evidence ages
    and eventually falls below ``MIN_EVIDENCE``. ``max_step_seconds`` keeps one
    observation after a long pause (an operator restart) from counting as a whole
    half-life of evidence on its own.
    """
    obs = np.asarray(observed, dtype=np.float64)
    fc = np.asarray(forecast, dtype=np.float64)
    dt = np.maximum(np.asarray(dt_seconds, dtype=np.float64), 0.0)
    hl = np.asarray(half_life_seconds, dtype=np.float64)
    decay = np.exp2(-dt / hl)
    add = 1.0 - np.exp2(-np.minimum(dt, max_step_seconds) / hl)
    ok = np.isfinite(obs) & np.isfinite(fc) & (obs >= 0) & (fc >= 0)
    a = np.where(ok, add, 0.0)
    return State(
        observed=state.observed * decay + a * np.where(ok, obs, 0.0),
        forecast=state.forecast * decay + a * np.where(ok, fc, 0.0),
        weight=state.weight * decay + a,
    )


def factor(
    state: State,
    *,
    low: np.ndarray | float,
    high: np.ndarray | float,
    min_level: np.ndarray | float,
    min_evidence: float = MIN_EVIDENCE,
    deadband: float = DEADBAND,
) -> np.ndarray:
    """The clamped observed/forecast ratio, NaN where there is not enough evidence
    (too few observations, or a forecast too low for its ratio to mean anything);
    within ``deadband`` of 1 it is 1."""
    w = state.weight
    with np.errstate(divide="ignore", invalid="ignore"):
        level = np.where(w > 0, state.forecast / w, 0.0)
        ratio = state.observed / state.forecast
    # 1e-9: twenty 30 s steps of a 600 s half-life are one half-life, even in floats.
    enough = (w >= min_evidence - 1e-9) & (level >= min_level) & (state.forecast > 0)
    f = np.clip(ratio, low, high)
    f = np.where(np.abs(f - 1.0) < deadband, 1.0, f)
    return np.where(enough, f, np.nan)


def track(
    observed: np.ndarray,
    forecast: np.ndarray,
    dt_seconds: float,
    half_life_seconds: np.ndarray | float,
    *,
    low: np.ndarray | float,
    high: np.ndarray | float,
    min_level: np.ndarray | float,
) -> np.ndarray:
    """The factor after each of T updates, (W, T): ``update`` then ``factor`` at every
    column, exactly as the operator does once per reconcile. Column t uses columns
    ≤ t only, so a back-test built on it cannot look ahead."""
    obs = np.atleast_2d(np.asarray(observed, dtype=np.float64))
    fc = np.broadcast_to(np.atleast_2d(np.asarray(forecast, dtype=np.float64)), obs.shape)
    n_rows, n = obs.shape
    # Per-workload settings are (W,) vectors (a (W, 1) column would broadcast to W × W).
    low, high, min_level = (np.broadcast_to(np.asarray(x, dtype=np.float64), (n_rows,))
                            for x in (low, high, min_level))  # fmt: skip
    st = State.empty(n_rows)
    out = np.empty((n_rows, n), dtype=np.float64)
    for t in range(n):
        st = update(st, obs[:, t], fc[:, t], dt_seconds, half_life_seconds)
        out[:, t] = factor(st, low=low, high=high, min_level=min_level)
    return out


def corrected_floor(
    planned: np.ndarray,
    window_need: np.ndarray,
    factor_now: np.ndarray,
    *,
    keep: np.ndarray,
    lower: np.ndarray | int,
    ceiling: np.ndarray | int,
) -> np.ndarray:
    """The floor with the correction applied: ceil(factor × the window's largest
    un-rounded need), never below ``keep`` (the lowest floor the policy lets a
    correction reach) and clamped like every floor (the lower bound wins over the
    ceiling). Where the factor is NaN the planned floor stands unchanged.

    ``window_need`` is max over [now − hold, now + lead] of load × (1 + headroom) ×
    event factor / per-replica before the ceil; as ceil is monotone, ceil(f × max)
    is the max of ceil(f × need): the same floor rule on the corrected forecast.
    """
    f = np.asarray(factor_now, dtype=np.float64)
    need = planning.ceil_replicas(np.where(np.isnan(f), 0.0, f) * window_need).astype(np.int64)
    lo = np.asarray(lower, dtype=np.int64)
    hi = np.asarray(ceiling, dtype=np.int64)
    fixed = np.maximum(np.minimum(np.maximum(need, keep), hi), lo)
    return np.where(np.isnan(f), planned, fixed).astype(np.int64)
