"""The accuracy guard: is the forecast the floors come from still describing the load?
(docs/policy.md, "Accuracy guard").

Two figures over a rolling window of the operator's own observations, each
observation a triple (observed load, forecast load, the load the floor was sized
for):

* the weighted absolute percentage error, WAPE = Σ|a − f| / Σ|a|: the mean absolute
  error of Hyndman & Athanasopoulos, Forecasting: Principles and Practice, 3rd ed.,
  §5.8 ("Evaluating point forecast accuracy"), divided by the mean actual load (the
  same measure as ``core.forecasting.evaluation.wape``; the chapter's remark that
  percentage errors explode near zero, from memory, is why it is not MAPE), here
  with each observation weighted by the time it held;
* the exceedance, the share of the window's time the observed load was above what
  the floor was sized for.

Observations arrive at irregular instants (each reconcile, HPA status events, nothing
at all while the operator is down), so every sum is time-weighted: an observation
holds until the next one (last observation carried forward) for at most ``max_hold``;
a longer gap is missing data, not more of the same. Judging needs evidence: observed
time of at least ``MIN_EVIDENCE`` of the window, and a mean load of at least
``min_level`` (one replica's worth: below it, percentages of almost nothing mean
nothing). The guard trips when either figure passes its threshold and recovers after
both stayed within them, judged, for ``recover_after``.

Memory is bounded (``core.buckets``: 12 buckets per window); pure numpy, vectorized
over workloads that share one window length; time is a parameter (seconds).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from floorcast.core import buckets

#: Buckets per window: the window read covers 11/12 to 12/12 of it.
BUCKETS = 12
#: Observed share of the window needed before judging (common practice, no source).
MIN_EVIDENCE = 0.5
#: One observation holds for at most this long, and at most a quarter of the window
#: (common practice, no source): ten reconcile intervals of 30 s.
MAX_HOLD_SECONDS = 300.0
#: What ``verdict`` holds: not judged (too little evidence or load), within the
#: thresholds, past one of them.
UNJUDGED, GOOD, BAD = 0, 1, 2
_W, _ERR, _ACT, _EXC = range(4)


@dataclass(frozen=True)
class Settings:
    window: float  # seconds, shared by the workloads of one state
    max_error: np.ndarray | float
    max_exceedance: np.ndarray | float
    recover_after: np.ndarray | float  # seconds
    min_level: np.ndarray | float

    @property
    def max_hold(self) -> float:
        return min(MAX_HOLD_SECONDS, self.window / 4)


@dataclass(frozen=True)
class State:
    ring: buckets.Ring  # K = 4: seconds observed, Σ|a−f|·dt, Σa·dt, Σ[a>u]·dt
    last_at: np.ndarray  # (W,) seconds of the pending observation; NaN: none
    last: np.ndarray  # (W, 3) its (actual, forecast, upper); NaN actual: unusable
    tripped: np.ndarray  # (W,) bool
    tripped_at: np.ndarray  # (W,) seconds, NaN while not tripped
    good_since: np.ndarray  # (W,) seconds judged good while tripped, NaN otherwise

    @staticmethod
    def empty(n: int, window: float) -> State:
        nan = np.full(n, np.nan)
        return State(buckets.Ring.empty(n, BUCKETS, 4, window / BUCKETS), nan.copy(),
                     np.full((n, 3), np.nan), np.zeros(n, dtype=bool), nan.copy(),
                     nan.copy())  # fmt: skip


@dataclass(frozen=True)
class Reading:
    """The window's figures at one instant (NaN where there is no load to divide by)."""

    error: np.ndarray  # WAPE
    exceedance: np.ndarray  # share of observed time above the sized load
    observed: np.ndarray  # observed share of the window, in [0, 1]
    level: np.ndarray  # mean observed load
    verdict: np.ndarray  # UNJUDGED, GOOD or BAD


def read(state: State, now: np.ndarray | float, s: Settings) -> Reading:
    """The figures over the window that ends at ``now`` and what they say."""
    tot = buckets.total(state.ring, now)
    w, err, act, exc = tot[:, _W], tot[:, _ERR], tot[:, _ACT], tot[:, _EXC]
    with np.errstate(divide="ignore", invalid="ignore"):
        wape = np.where(act > 0, err / act, np.nan)
        share = np.where(w > 0, exc / w, np.nan)
        level = np.where(w > 0, act / w, np.nan)
    seen = np.minimum(w / s.window, 1.0)
    judged = (seen >= MIN_EVIDENCE - 1e-9) & (level >= s.min_level) & np.isfinite(wape)
    bad = judged & ((wape > s.max_error) | (share > s.max_exceedance))
    verdict = np.where(bad, BAD, np.where(judged, GOOD, UNJUDGED))
    return Reading(wape, share, seen, level, verdict)


def update(state: State, actual: np.ndarray, forecast: np.ndarray, upper: np.ndarray,
           now: np.ndarray | float, s: Settings) -> tuple[State, Reading]:  # fmt: skip
    """Count the pending observation for the time it held (≤ ``max_hold``), keep this
    one pending, then trip or recover on the new figures.

    ``actual`` NaN (the HPA reports no load) adds nothing: the gap ages the evidence
    until the guard can no longer judge. A tripped guard stays tripped while it cannot
    judge: recovery needs ``recover_after`` of judged, good figures in a row."""
    t = np.broadcast_to(np.asarray(now, dtype=np.float64), state.last_at.shape)
    held = np.where(np.isfinite(state.last_at), t - state.last_at, 0.0)
    dt = np.clip(held, 0.0, s.max_hold)
    a, f, u = state.last[:, 0], state.last[:, 1], state.last[:, 2]
    ok = np.isfinite(a) & np.isfinite(f) & np.isfinite(u) & (a >= 0) & (dt > 0)
    vals = np.stack([dt, dt * np.abs(a - f), dt * a, dt * (a > u)], axis=1)
    vals = np.where(ok[:, None], vals, np.nan)
    # The held interval ends at now, or at last_at + max_hold when the gap was longer.
    end = np.where(np.isfinite(state.last_at), np.minimum(t, state.last_at + s.max_hold), t)
    ring = buckets.add(state.ring, vals, end)
    obs = np.stack([np.asarray(x, dtype=np.float64) * np.ones_like(t)
                    for x in (actual, forecast, upper)], axis=1)  # fmt: skip
    mid = State(ring, t.astype(np.float64).copy(), obs, state.tripped, state.tripped_at,
                state.good_since)  # fmt: skip
    r = read(mid, t, s)
    bad, good = r.verdict == BAD, r.verdict == GOOD
    was = state.tripped
    trip = ~was & bad
    good_since = np.where(was & good, np.where(np.isfinite(state.good_since),
                                               state.good_since, t), np.nan)  # fmt: skip
    recover = was & good & (t - good_since >= s.recover_after)
    tripped = (was | trip) & ~recover
    return State(ring, mid.last_at, obs, tripped,
                 np.where(trip, t, np.where(tripped, state.tripped_at, np.nan)),
                 np.where(tripped, good_since, np.nan)), r  # fmt: skip


def track(actual: np.ndarray, forecast: np.ndarray, upper: np.ndarray, times: np.ndarray,
          s: Settings) -> tuple[np.ndarray, np.ndarray, np.ndarray]:  # fmt: skip
    """Replay the guard over (W, T) observations at ``times`` (T,) seconds: (tripped,
    error, exceedance), each (W, T), column t from columns ≤ t only, exactly as the
    operator runs ``update`` once per observation."""
    tripped, r = track_readings(actual, forecast, upper, times, s)
    return tripped, r.error, r.exceedance


def track_readings(actual: np.ndarray, forecast: np.ndarray, upper: np.ndarray,
                   times: np.ndarray, s: Settings) -> tuple[np.ndarray, Reading]:  # fmt: skip
    """``track`` with every figure of each reading kept, each (W, T): the back-test
    (``floorcast.replay_guard``) reports how often the guard could judge and the
    spread of the judged figures, to help pick thresholds."""
    a = np.atleast_2d(np.asarray(actual, dtype=np.float64))
    f = np.broadcast_to(np.atleast_2d(np.asarray(forecast, dtype=np.float64)), a.shape)
    u = np.broadcast_to(np.atleast_2d(np.asarray(upper, dtype=np.float64)), a.shape)
    n_rows, n = a.shape
    st = State.empty(n_rows, s.window)
    tripped = np.zeros((n_rows, n), dtype=bool)
    out = Reading(*(np.empty((n_rows, n)) for _ in range(4)),
                  np.empty((n_rows, n), dtype=np.int64))  # fmt: skip
    for i in range(n):
        st, r = update(st, a[:, i], f[:, i], u[:, i], float(times[i]), s)
        tripped[:, i] = st.tripped
        for name in ("error", "exceedance", "observed", "level", "verdict"):
            getattr(out, name)[:, i] = getattr(r, name)
    return tripped, out
