"""Load forecast → required replicas → replica floor schedule, for many workloads at once.

Everything here works on 2-D arrays (workloads × time steps on one shared grid) so an
operator with thousands of policies plans them in a few numpy passes instead of a
Python loop per policy. No I/O, no clock: "now" is always a parameter.

The floor rule (docs/policy.md):
    r(t)       = ceil(load(t) × (1 + headroom) × event_factor(t) / per_replica)
    floor(now) = clamp(max r(t) for t in [now − hold, now + lead], lower, ceiling)
with lower = max(HPA baseline, policy minReplicas) and ceiling = min(policy
maxReplicas, HPA maxReplicas). The lower bound wins over the ceiling: floorcast never
sets ``minReplicas`` below what the owner chose, even if a policy's ``maxReplicas`` is
lower than that.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

#: Relative tolerance applied before ``ceil``. A need of 3.0000000001 replicas is float
#: representation error on an exact 3 (e.g. 2.4 / 0.8), not a reason for a 4th pod.
#: 1e-9 is far above float64 rounding (~1e-16 relative) and far below any real need
#: increment (a millionth of a replica at a thousand replicas is still 1e-9).
CEIL_REL_EPS = 1e-9
#: Needs saturate here before the int32 cast (a cast of 1e12 or inf wraps or is
#: undefined); every ceiling is an HPA replica count, itself an int32, so saturating
#: and then clamping to the ceiling is clamping to the ceiling.
INT32_MAX = np.iinfo(np.int32).max


class PlanningError(ValueError):
    """The inputs cannot give a trustworthy floor (e.g. the forecast ends too soon)."""


def ceil_replicas(need: np.ndarray) -> np.ndarray:
    """``ceil`` that forgives float representation error (see ``CEIL_REL_EPS``)."""
    need = np.asarray(need, dtype=np.float64)
    # int32: a replica count never needs more, and half the memory traffic of int64.
    need = np.ceil(need - np.abs(need) * CEIL_REL_EPS)
    return np.nan_to_num(np.minimum(need, INT32_MAX), nan=INT32_MAX).astype(np.int32)


def required_replicas(
    load: np.ndarray,
    per_replica: np.ndarray | float,
    headroom: np.ndarray | float = 0.0,
    event_factor: np.ndarray | float = 1.0,
) -> np.ndarray:
    """Replicas needed so that each carries at most ``per_replica`` of the load.

    This is the HPA's own rule (desired = ceil(current × metric / target)) seen from
    the total load: current × metric is the total, target is what one replica carries.
    Per-workload parameters are column vectors broadcast along time.
    """
    load = np.atleast_2d(np.asarray(load, dtype=np.float64))
    cap = _col(per_replica, load.shape[0])
    if np.any(cap <= 0) or not np.all(np.isfinite(cap)):
        raise PlanningError("per-replica capacity must be a finite number > 0")
    # Fold the per-row constants (and the ceil tolerance: load >= 0, so ceil(x − x·eps)
    # is ceil(x·(1 − eps))) into one column first and work in place: on fleet-sized
    # arrays each full pass costs more than all the arithmetic on (W, 1) columns.
    col = (1.0 + _col(headroom, load.shape[0])) / cap * (1.0 - CEIL_REL_EPS)
    need = load * col
    if not (np.isscalar(event_factor) and event_factor == 1.0):
        need *= event_factor
    np.ceil(need, out=need)
    np.minimum(need, INT32_MAX, out=need)  # NaN (0 × inf) stays NaN: saturate it too
    need[np.isnan(need)] = INT32_MAX
    return need.astype(np.int32)


def event_factors(
    times: pd.DatetimeIndex, events: Sequence[Sequence[tuple[pd.Timestamp, pd.Timestamp, float]]]
) -> np.ndarray:
    """Per-workload load multipliers on the grid: 1 outside events, the largest inside.

    Each sample at time t belongs to an event when start <= t < end (half-open, so two
    back-to-back events never both claim their shared instant).
    """
    t = times.as_unit("ns").asi8  # pandas 3 may pick µs resolution; compare in ns
    out = np.ones((len(events), len(t)), dtype=np.float64)
    for w, evs in enumerate(events):
        inside_any = np.zeros(len(t), dtype=bool)
        best = np.full(len(t), -np.inf)
        for start, end, factor in evs:
            lo, hi = (pd.Timestamp(x).as_unit("ns").value for x in (start, end))
            inside = (t >= lo) & (t < hi)
            best = np.where(inside, np.maximum(best, factor), best)
            inside_any |= inside
        out[w] = np.where(inside_any, best, 1.0)
    return out


def window_steps(duration: pd.Timedelta, step: pd.Timedelta) -> int:
    """Grid steps a duration spans, rounded up: a partial step is still covered."""
    steps = pd.Timedelta(duration) / pd.Timedelta(step)
    return int(np.ceil(steps - 1e-9))


def sliding_max(values: np.ndarray, behind: int, ahead: int) -> np.ndarray:
    """out[:, i] = max(values[:, i - behind : i + ahead + 1]), clipped at the edges.

    Doubling (the sparse-table range-maximum idea; Bender & Farach-Colton, "The LCA
    Problem Revisited", LATIN 2000 — cited from memory): after k passes each cell holds
    the maximum of the 2^k cells from it, and any window is the maximum of two such
    overlapping spans. log2(window) + 1 whole-array passes, each a contiguous numpy
    op; with the narrow dtypes ``floor_schedule`` uses, this is memory-bound and fast.
    """
    values = np.asarray(values)
    n_rows, n = values.shape
    w = behind + ahead + 1
    if w == 1 or n == 0:
        return values.copy()
    # A window wider than the series sees the whole series: same result, and the
    # work and memory stay bounded by its length whatever the lead and hold.
    behind, ahead = min(behind, n - 1), min(ahead, n - 1)
    w = behind + ahead + 1
    fill = np.iinfo(values.dtype).min if values.dtype.kind in "iu" else -np.inf
    m = np.full((n_rows, n + w - 1), fill, dtype=values.dtype)
    m[:, behind : behind + n] = values
    span = 1
    while span * 2 <= w:
        m = np.maximum(m[:, :-span], m[:, span:])
        span *= 2
    return np.maximum(m[:, :n], m[:, w - span : w - span + n])


def floor_schedule(
    required: np.ndarray,
    lead_steps: np.ndarray | int,
    hold_steps: np.ndarray | int,
    lower: np.ndarray | int,
    ceiling: np.ndarray | int,
) -> np.ndarray:
    """The floor at every grid step for every workload.

    Rows are grouped by their (hold, lead) window so workloads sharing settings (the
    usual case: most policies keep the defaults) are planned in one vectorized pass.
    Steps near the end whose lead window runs past the forecast are still computed
    from what is there; ``Schedule.covered`` says which steps are trustworthy.
    """
    required = np.atleast_2d(required)
    n_rows = required.shape[0]
    lead = np.broadcast_to(np.asarray(lead_steps, dtype=np.int64), (n_rows,))
    hold = np.broadcast_to(np.asarray(hold_steps, dtype=np.int64), (n_rows,))
    if np.any(lead < 0) or np.any(hold < 0):
        raise PlanningError("lead and hold windows must not be negative")
    lo = _col(lower, n_rows).astype(np.int64)
    hi = _col(ceiling, n_rows).astype(np.int64)
    # min(·, ceiling) commutes with the window maximum, so clip first: the values then
    # fit the narrowest unsigned type, which makes the sliding maximum 4-8× cheaper on
    # fleet-sized arrays (it is memory-bound).
    top = int(max(hi.max(initial=0), lo.max(initial=0)))
    narrow = next(t for t in (np.uint8, np.uint16, np.uint32) if top <= np.iinfo(t).max)
    clipped = np.minimum(required, hi).astype(narrow)
    raw = np.empty_like(clipped)
    keys = np.stack([hold, lead], axis=1)
    uniq, group = np.unique(keys, axis=0, return_inverse=True)
    if len(uniq) == 1:
        raw = sliding_max(clipped, int(uniq[0, 0]), int(uniq[0, 1]))
    else:
        for g, (h, ld) in enumerate(uniq):
            rows = np.flatnonzero(group.ravel() == g)
            raw[rows] = sliding_max(clipped[rows], int(h), int(ld))
    return np.maximum(raw, lo.astype(narrow)).astype(np.int32)


@dataclass(frozen=True)
class Changes:
    """Every floor change of every workload, as flat parallel arrays.

    Flat arrays (not lists of objects) keep extraction vectorized for big fleets;
    ``for_workload`` gives one workload's rows.
    """

    workload: np.ndarray  # row index of the workload
    index: np.ndarray  # grid step where the new floor starts
    old: np.ndarray
    new: np.ndarray
    cause_index: np.ndarray  # for a rise: step whose need entered the lead window; else -1

    def for_workload(self, w: int) -> Changes:
        m = self.workload == w
        return Changes(
            self.workload[m], self.index[m], self.old[m], self.new[m], self.cause_index[m]
        )

    def __len__(self) -> int:
        return len(self.index)


@dataclass(frozen=True)
class Schedule:
    """The planned floors on the forecast grid, with the inputs that explain them."""

    start: pd.Timestamp
    step: pd.Timedelta
    required: np.ndarray  # (W, T) replicas needed at each step
    floor: np.ndarray  # (W, T) floor in force from each step
    covered: np.ndarray  # (W,) number of leading steps whose whole lead window is forecast
    changes: Changes

    @property
    def times(self) -> pd.DatetimeIndex:
        return pd.date_range(self.start, periods=self.floor.shape[1], freq=self.step)

    def index_at(self, now: pd.Timestamp) -> int:
        """The grid step in force at ``now`` (samples hold until the next one)."""
        return int((pd.Timestamp(now) - self.start) // self.step)

    def check_covers(self, now: pd.Timestamp, lead: Sequence[pd.Timedelta] | None = None) -> int:
        """Index at ``now``, or a PlanningError saying why the forecast cannot decide it."""
        i = self.index_at(now)
        if i < 0:
            raise PlanningError(f"forecast starts at {_iso(self.start)}, after now ({_iso(now)})")
        bad = np.flatnonzero(self.covered <= i)
        if len(bad):
            w = int(bad[0])
            end = self.start + (self.floor.shape[1] - 1) * self.step
            lead_txt = f" + lead time {lead[w]}" if lead is not None else " + lead time"
            raise PlanningError(
                f"forecast ends at {_iso(end)}, before now{lead_txt} "
                f"(now = {_iso(now)}); it cannot say what the floor must be"
            )
        return i

    def floor_at(self, now: pd.Timestamp) -> np.ndarray:
        return self.floor[:, self.check_covers(now)]

    def next_change(self, w: int, now: pd.Timestamp) -> tuple[pd.Timestamp, int, int] | None:
        """First change of workload ``w`` strictly after ``now``, within coverage."""
        i = self.index_at(now)
        ch = self.changes.for_workload(w)
        m = (ch.index > i) & (ch.index < self.covered[w])
        if not np.any(m):
            return None
        j = int(np.flatnonzero(m)[0])
        return self.start + int(ch.index[j]) * self.step, int(ch.old[j]), int(ch.new[j])


def change_points(floor: np.ndarray, lead_steps: np.ndarray | int) -> Changes:
    """Where each workload's floor changes, and for rises the step that caused them.

    The window slides one step at a time, so a rise can only come from the one sample
    that just entered at the lead edge: the cause of a rise at step i is i + lead.
    """
    floor = np.atleast_2d(floor)
    lead = np.broadcast_to(np.asarray(lead_steps, dtype=np.int64), (floor.shape[0],))
    w, i = np.nonzero(floor[:, 1:] != floor[:, :-1])
    i = i + 1
    old = floor[w, i - 1]
    new = floor[w, i]
    cause = np.where(new > old, np.minimum(i + lead[w], floor.shape[1] - 1), -1)
    return Changes(w.astype(np.int64), i.astype(np.int64), old, new, cause.astype(np.int64))


def plan(
    start: pd.Timestamp,
    step: pd.Timedelta,
    load: np.ndarray,
    *,
    per_replica: np.ndarray | float,
    headroom: np.ndarray | float,
    lead: Sequence[pd.Timedelta] | pd.Timedelta,
    hold: Sequence[pd.Timedelta] | pd.Timedelta,
    lower: np.ndarray | int,
    ceiling: np.ndarray | int,
    event_factor: np.ndarray | float = 1.0,
) -> Schedule:
    """Plan floors for W workloads whose loads share one grid (``load`` is W × T)."""
    load = np.atleast_2d(np.asarray(load, dtype=np.float64))
    n_rows, n = load.shape
    if n == 0:
        raise PlanningError("the forecast has no points")
    if not np.all(np.isfinite(load)) or np.any(load < 0):
        raise PlanningError("forecast load must be finite and >= 0")
    lead_steps = _window_steps_many(lead, step, n_rows)
    hold_steps = _window_steps_many(hold, step, n_rows)
    req = required_replicas(load, per_replica, headroom, event_factor)
    floor = floor_schedule(req, lead_steps, hold_steps, lower, ceiling)
    covered = np.maximum(n - lead_steps, 0)
    return Schedule(
        start=pd.Timestamp(start),
        step=pd.Timedelta(step),
        required=req,
        floor=floor,
        covered=covered,
        changes=change_points(floor, lead_steps),
    )


def _col(x: np.ndarray | float, n_rows: int) -> np.ndarray:
    """A per-workload scalar or vector as an (n_rows, 1) column for broadcasting."""
    a = np.asarray(x, dtype=np.float64)
    if a.ndim == 0:
        return np.full((n_rows, 1), float(a))
    if a.ndim == 1 and len(a) == n_rows:
        return a.reshape(n_rows, 1)
    if a.shape == (n_rows, 1):
        return a
    raise PlanningError(f"expected a scalar or {n_rows} per-workload values, got shape {a.shape}")


def _window_steps_many(
    x: Sequence[pd.Timedelta] | pd.Timedelta, step: pd.Timedelta, n_rows: int
) -> np.ndarray:
    """``window_steps`` for one duration or one per workload, without a Python loop."""
    if isinstance(x, pd.Timedelta | np.timedelta64) or hasattr(x, "total_seconds"):
        return np.full(n_rows, window_steps(pd.Timedelta(x), step), dtype=np.int64)
    ns = pd.to_timedelta(list(x)).as_unit("ns").asi8
    if len(ns) != n_rows:
        raise PlanningError(f"expected {n_rows} durations, got {len(ns)}")
    ratio = ns / pd.Timedelta(step).as_unit("ns").value
    return np.ceil(ratio - 1e-9).astype(np.int64)


def _iso(t: pd.Timestamp) -> str:
    return pd.Timestamp(t).tz_convert("UTC").strftime("%Y-%m-%dT%H:%M:%SZ")


def refine(
    load: np.ndarray, step: pd.Timedelta, fine: pd.Timedelta, *, centred: bool = False
) -> np.ndarray:
    """A (W, H) forecast on ``step`` read at the finer ``fine`` grid (H · step / fine
    points from the same start), by straight lines between the forecast's points.

    Why: the need is planned per grid step, but the load ramps between forecast
    points. Planned at whole forecast steps, a rise inside one step is covered only
    from the step after it, up to half a step late when the lead time is shorter
    than the step; on the grid the HPA acts on, the lead window starts exactly a
    lead before each instant's need. ``centred`` says each point is the mean of the
    step it labels (a resampled forecast), so it is placed at the step's middle;
    otherwise at its start (a sample). Beyond the first/last point the value is held.
    """
    load = np.atleast_2d(np.asarray(load, dtype=np.float64))
    ratio = pd.Timedelta(step) / pd.Timedelta(fine)
    k = round(ratio)
    if k < 1 or abs(ratio - k) > 1e-9:
        raise PlanningError(f"planning step {fine} must divide the forecast step {step}")
    if k == 1:
        return load.copy()
    h = load.shape[1]
    pos = np.arange(h * k, dtype=np.float64) / k - (0.5 - 0.5 / k if centred else 0.0)
    pos = np.clip(pos, 0.0, h - 1)
    i = np.minimum(np.floor(pos).astype(np.int64), max(h - 2, 0))
    w = pos - i
    j = np.minimum(i + 1, h - 1)
    return load[:, i] * (1.0 - w) + load[:, j] * w


#: The finest grid a forecast is planned on (docs/policy.md, "Planning resolution"):
#: one minute is twice the operator's default reconcile interval and four HPA syncs,
#: so finer buys nothing the operator could act on (common practice, no source).
PLAN_RESOLUTION = pd.Timedelta(minutes=1)
#: At most this many refined points per plan: a 100 000-point forecast on an hourly
#: step would otherwise become 6 million points per reconcile. 200 000 is 139 days
#: at one minute, far beyond any forecast's useful horizon.
MAX_PLAN_POINTS = 200_000


def plan_resolution(
    step: pd.Timedelta,
    n_points: int,
    *,
    finest: pd.Timedelta = PLAN_RESOLUTION,
    max_points: int = MAX_PLAN_POINTS,
) -> pd.Timedelta:
    """The grid a forecast of ``n_points`` on ``step`` is planned on: ``finest`` or
    the step, whichever is finer, coarsened (to a divisor of the step) until the
    refined forecast has at most ``max_points`` points.

    Why a divisor: every planned instant is then a real instant on both grids, so a
    floor change falls on ``start + i · fine`` and a forecast point is never skipped.
    """
    step, finest = pd.Timedelta(step), pd.Timedelta(finest)
    if finest >= step or step.value % finest.value:
        return step
    k_max = step.value // finest.value
    fits = max(1, max_points // max(int(n_points), 1))
    k = next(k for k in range(min(k_max, fits), 0, -1) if k_max % k == 0)
    return step / k


def cover_intervals(fine: np.ndarray) -> np.ndarray:
    """Each grid point's load raised to the larger end of the interval it starts.

    Why: the floor in force from grid point t must carry the load until t + fine, and
    on a straight line the largest value over [t, t + fine] is at one of its ends;
    read at t alone, a rising load outruns the floor inside every interval (the
    back-test's oracle saturated 1.5 minutes a day on a steep ramp planned at one
    minute). The last point has no interval after it and keeps its value.
    """
    fine = np.atleast_2d(np.asarray(fine, dtype=np.float64))
    out = fine.copy()
    np.maximum(out[:, :-1], fine[:, 1:], out=out[:, :-1])
    return out


def refined_points(n_points: int, step: pd.Timedelta, fine: pd.Timedelta) -> int:
    """How many ``fine`` instants lie from a forecast's first point to its last: the
    refined points past the last one would be extrapolation, not forecast."""
    k = round(pd.Timedelta(step) / pd.Timedelta(fine))
    return (int(n_points) - 1) * k + 1 if n_points > 0 else 0
