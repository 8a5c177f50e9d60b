"""The reactive HorizontalPodAutoscaler as the Kubernetes documentation publishes it.

A back-test is only an argument if the baseline it beats is the real HPA, not a
strawman, so every rule here follows the page "Horizontal Pod Autoscaling"
(https://kubernetes.io/docs/tasks/run-application/horizontal-pod-autoscale/, cited
below as [HPA doc] with its section). Where the page is silent, the behaviour is the
upstream controller's (pkg/controller/podautoscaler, from memory) and marked so.

Simplifications (each also marked where it applies):

* One CPU ``averageUtilization`` metric; demand is what the pods would use, uncapped,
  so utilization can exceed 100 % (the amount by which it does is what we report).
* A new pod becomes ready exactly ``ready_delay`` after it is created and counts as
  serving capacity from then on; the controller's CPU initialization period and
  initial readiness delay are folded into that one delay.
* The metric a sync reads is the usage of the previous sync interval (usage is a
  rate measured over a past window) or, with ``metric_resolution_seconds``, the
  usage at the newest metrics-server scrape before it (see ``_seen``).
* Removing a pod frees its capacity at once (no graceful-termination tail), and a
  scale-down removes not-ready pods first (the ReplicaSet controller's deletion
  order, from memory).

Measured against the real controller (``e2e/fidelity.py`` on the e2e harness's living
cluster: real kube-controller-manager, metrics-server, Pods Ready 40 s after start):
on a 20-minute compressed day the model's replica-minutes were 1.00× the real ones
and its saturation minutes 1.8 against 2.5 (within the 2-minute target; the model
starts a Pod's clock at once, the cluster a second or two later); on the CI
scenarios' day both agree within 1 %. Figures and method: docs/hpa-model.md.

Everything is vectorized over a batch of scenarios (rows): only time is a loop.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np

PolicyType = Literal["Pods", "Percent"]
Select = Literal["Max", "Min", "Disabled"]

#: [HPA doc] "Algorithm details": the control plane skips scaling when the ratio is
#: within a globally-configurable tolerance, 0.1 by default.
DEFAULT_TOLERANCE = 0.1
#: [HPA doc] "How does a HorizontalPodAutoscaler work?": kube-controller-manager's
#: --horizontal-pod-autoscaler-sync-period defaults to 15 seconds.
DEFAULT_SYNC_SECONDS = 15


@dataclass(frozen=True)
class ScalingPolicy:
    """One rate limit: at most ``value`` pods or percent per ``period_seconds``."""

    type: PolicyType
    value: int
    period_seconds: int


@dataclass(frozen=True)
class ScalingRules:
    stabilization_window_seconds: int
    policies: tuple[ScalingPolicy, ...]
    select_policy: Select = "Max"
    tolerance: float = DEFAULT_TOLERANCE


#: [HPA doc] "Default behavior": scale-up has no stabilization window and may add
#: the larger of 100 % or 4 pods every 15 s (selectPolicy Max).
DEFAULT_SCALE_UP = ScalingRules(
    0, (ScalingPolicy("Percent", 100, 15), ScalingPolicy("Pods", 4, 15)), "Max"
)
#: [HPA doc] "Default behavior": scale-down uses a 300 s stabilization window and may
#: remove 100 % of the pods every 15 s.
DEFAULT_SCALE_DOWN = ScalingRules(300, (ScalingPolicy("Percent", 100, 15),), "Max")


@dataclass(frozen=True)
class HpaConfig:
    """What the simulated HPA is configured with; ``min_replicas`` is per scenario."""

    max_replicas: int
    target_utilization: float  # fraction, e.g. 0.7 for averageUtilization: 70
    scale_up: ScalingRules = DEFAULT_SCALE_UP
    scale_down: ScalingRules = DEFAULT_SCALE_DOWN
    sync_seconds: int = DEFAULT_SYNC_SECONDS
    #: How often the metrics pipeline samples usage (metrics-server's
    #: --metric-resolution, 15 s by default per its documentation). 0 keeps the
    #: simpler rule: a sync sees the previous interval's usage.
    metric_resolution_seconds: float = 0.0


def desired_replicas(
    current: np.ndarray | int,
    current_metric: np.ndarray | float,
    target_metric: np.ndarray | float,
    tolerance: float = DEFAULT_TOLERANCE,
) -> np.ndarray:
    """[HPA doc] "Algorithm details": desiredReplicas = ceil[currentReplicas ×
    currentMetricValue / desiredMetricValue], unchanged while the ratio is within
    the tolerance of 1.0."""
    cur = np.asarray(current, dtype=np.int64)
    ratio = np.asarray(current_metric, dtype=np.float64) / np.asarray(target_metric)
    out = np.ceil(cur * ratio).astype(np.int64)
    return np.where(np.abs(1.0 - ratio) <= tolerance, cur, out)


def scale_up_limit(current: np.ndarray, added: np.ndarray, rules: ScalingRules) -> np.ndarray:
    """Most replicas the scale-up policies allow now.

    [HPA doc] "Scaling policies": ``periodSeconds`` is how far back a policy must hold;
    selectPolicy Max picks the policy allowing the largest change. Each policy counts
    from the replicas at the start of its period (current minus what it added since),
    and a Percent limit is rounded up (upstream controller, from memory: otherwise a
    small workload could never grow). ``added`` is (policies, rows).
    """
    if rules.select_policy == "Disabled" or not rules.policies:
        return np.asarray(current).copy()
    props = []
    for i, p in enumerate(rules.policies):
        start = current - added[i]
        if p.type == "Pods":
            props.append(start + p.value)
        else:
            props.append(np.ceil(start * (1.0 + p.value / 100.0) - 1e-9).astype(np.int64))
    stack = np.stack(props)
    return stack.min(axis=0) if rules.select_policy == "Min" else stack.max(axis=0)


def scale_down_limit(current: np.ndarray, removed: np.ndarray, rules: ScalingRules) -> np.ndarray:
    """Fewest replicas the scale-down policies allow now.

    [HPA doc] "Scaling policies" example: with 80 replicas and a 10 % policy, 8 are
    removed; at 72, "10% of the pods is 7.2 but the number is rounded up to 8" — so
    the remaining count is rounded down. Max (the default) allows the largest removal.
    """
    if rules.select_policy == "Disabled" or not rules.policies:
        return np.asarray(current).copy()
    props = []
    for i, p in enumerate(rules.policies):
        start = current + removed[i]
        if p.type == "Pods":
            props.append(start - p.value)
        else:
            props.append(np.floor(start * (1.0 - p.value / 100.0) + 1e-9).astype(np.int64))
    stack = np.stack(props)
    return stack.max(axis=0) if rules.select_policy == "Min" else stack.min(axis=0)


@dataclass(frozen=True, eq=False)
class Trace:
    """Per row and sync interval, the state after that sync's decision."""

    replicas: np.ndarray  # (B, T) all existing pods, ready or not
    ready: np.ndarray  # (B, T) pods serving during the interval
    scaled: np.ndarray = field(repr=False)  # (B, T) bool: this sync changed the count


def _window(seconds: int, sync: int) -> int:
    """Past syncs inside a window: an event at now − j·sync counts while j·sync < window
    (the controller keeps events strictly after now − window; upstream, from memory)."""
    return max(int(np.ceil(seconds / sync - 1e-9)) - 1, 0)


def simulate(
    demand: np.ndarray,
    min_replicas: np.ndarray,
    *,
    per_replica: float,
    hpa: HpaConfig,
    ready_delay_steps: np.ndarray | int,
) -> Trace:
    """Replay ``demand`` (B, T) or (T,) — load during each sync interval, in the
    policy's unit — through the HPA with a per-row, per-step ``min_replicas`` (B, T).

    ``per_replica`` is the load one ready pod carries at the target utilization, so
    the utilization ratio the controller sees is load / (ready × per_replica). Rows
    start settled: all pods ready at what the first interval's load needs.
    """
    mins = np.atleast_2d(np.asarray(min_replicas, dtype=np.int64))
    b, t_len = mins.shape
    dem = np.broadcast_to(np.atleast_2d(np.asarray(demand, dtype=np.float64)), (b, t_len))
    if not (per_replica > 0 and np.isfinite(per_replica)):
        raise ValueError("per-replica capacity must be a finite number > 0")
    if np.any(mins < 1):
        raise ValueError("minReplicas must be >= 1")
    delay = np.broadcast_to(np.asarray(ready_delay_steps, dtype=np.int64), (b,)).copy()
    if np.any(delay < 0):
        raise ValueError("ready delay must not be negative")
    st = _State(b, delay, hpa)
    n = np.ceil(dem[:, 0] / per_replica - 1e-9).astype(np.int64)
    n = np.maximum(np.minimum(n, hpa.max_replicas), mins[:, 0])
    st.n, st.ready = n, n.copy()
    # [HPA doc] "Stabilization window": recommendations of the past window; a new
    # controller seeds it with the current count (upstream, from memory).
    st.recs[:, -1], st.rec_ok[:, -1] = n, True
    out_n = np.empty((b, t_len), dtype=np.int64)
    out_r = np.empty((b, t_len), dtype=np.int64)
    scaled = np.zeros((b, t_len), dtype=bool)
    seen = _seen(dem, hpa)
    k = 0
    while k < t_len:
        stop = st.advance(k, seen, mins, per_replica)
        if stop > k:
            out_n[:, k:stop] = st.n[:, None]
            out_r[:, k:stop] = st.ready[:, None]
            k = stop
            continue
        scaled[:, k] = st.step(k, seen[:, k], mins[:, k], per_replica)
        out_n[:, k], out_r[:, k] = st.n, st.ready
        k += 1
    return Trace(replicas=out_n, ready=out_r, scaled=scaled)


def _seen(dem: np.ndarray, hpa: HpaConfig) -> np.ndarray:
    """The usage each sync reads: the previous interval's, or — with a metric
    resolution — the usage at the newest scrape before the previous interval ended
    (metrics-server serves the rate between its last two scrapes; with usage that
    is constant between scrapes, that is the usage at the newest one)."""
    t_len = dem.shape[1]
    k = np.arange(t_len)
    prev = np.maximum(k - 1, 0)
    res = hpa.metric_resolution_seconds
    if res > 0:
        per = res / hpa.sync_seconds
        prev = np.minimum((np.floor(prev / per + 1e-9) * per).astype(np.int64), prev)
    return dem[:, prev]


class _State:
    """The controller's memory and the pods' pipeline, as ring buffers indexed by
    absolute sync step modulo their length (no shifting per step)."""

    def __init__(self, b: int, delay: np.ndarray, hpa: HpaConfig):
        self.hpa, self.delay, self.rows = hpa, delay, np.arange(b)
        sync, up, down = hpa.sync_seconds, hpa.scale_up, hpa.scale_down
        self.d_len = int(delay.max()) + 1
        self.pend = np.zeros((b, self.d_len), dtype=np.int64)  # pods ready at that step
        self.w_up = _window(up.stabilization_window_seconds, sync)
        self.w_down = _window(down.stabilization_window_seconds, sync)
        self.s_len = max(self.w_up, self.w_down) + 1
        self.recs = np.zeros((b, self.s_len), dtype=np.int64)
        self.rec_ok = np.zeros((b, self.s_len), dtype=bool)
        self.up_w = [_window(p.period_seconds, sync) for p in up.policies]
        self.down_w = [_window(p.period_seconds, sync) for p in down.policies]
        self.e_len = max([*self.up_w, *self.down_w, 0]) + 1
        self.ev_up = np.zeros((b, self.e_len), dtype=np.int64)
        self.ev_down = np.zeros((b, self.e_len), dtype=np.int64)
        self.zero = np.zeros(b, dtype=np.int64)
        self.n = self.ready = self.zero

    def raw(self, load: np.ndarray, n: np.ndarray, ready: np.ndarray, per: float) -> np.ndarray:
        """The replica calculator's recommendation (any shape that broadcasts).

        [HPA doc] "Algorithm details": utilization is averaged over ready pods only;
        when scaling up, not-yet-ready pods are assumed to use 0 % of the target, and
        the scale-up is skipped if that reverses the direction or lands within the
        tolerance. Either way desired = ceil(ready × ratio) = ceil(total / per pod);
        the 1e-9 forgives float error on an exact whole number.
        """
        up, down = self.hpa.scale_up.tolerance, self.hpa.scale_down.tolerance
        ratio = load / (np.maximum(ready, 1) * per)
        hold = np.abs(1.0 - ratio) <= np.where(ratio > 1.0, up, down)
        hold |= ready == 0
        hold |= (n > ready) & (ratio > 1.0) & (load <= (1.0 + up) * n * per)
        return np.where(hold, n, np.ceil(ratio * ready - 1e-9).astype(np.int64))

    def advance(self, k: int, seen: np.ndarray, mins: np.ndarray, per: float) -> int:
        """Skip the steps from ``k`` at which no row can change; return the next step
        that needs a full sync (``k`` if this one does).

        A row keeps its count while its recommendation is not above it, it is at or
        above minReplicas, no pod turns ready, and a lower recommendation either meets
        a scale-down window that still holds one at least as high or is clamped back
        by minReplicas. Those recommendations are still recorded.
        """
        n, ready, t_len = self.n[:, None], self.ready[:, None], seen.shape[1]
        end = t_len
        if self.pend.any():
            ahead = (np.flatnonzero(self.pend.any(axis=0)) - k) % self.d_len
            end = min(end, k + int(ahead.min()))
        last = self._last_at_least(k) if self.w_down else None
        j, chunk = k, 32
        while j < end:
            e = min(end, j + chunk)
            raw = self.raw(seen[:, j:e], n, ready, per)
            lo = mins[:, j:e]
            ok = (raw <= n) & (lo <= n)
            pinned = lo == n  # a lower recommendation is clamped back to minReplicas
            if self.w_down:
                idx = np.arange(j, e)
                lastv = np.maximum.accumulate(np.where(raw >= n, idx, -(10**12)), axis=1)
                lastv = np.maximum(lastv, last[:, None])
                ok &= ((idx - lastv) <= self.w_down) | pinned
                last = lastv[:, -1]
            else:
                ok &= (raw >= n) | pinned
            bad = ~ok.all(axis=0)
            if bad.any():
                stop = j + int(bad.argmax())
                self._record(j, stop, raw[:, : stop - j])
                return stop
            self._record(j, e, raw)
            j, chunk = e, chunk * 4
        return end

    def _last_at_least(self, k: int) -> np.ndarray:
        """Absolute step of each row's newest recorded recommendation >= its count."""
        back = np.arange(1, self.s_len + 1)
        cols = (k - back) % self.s_len
        ge = self.rec_ok[:, cols] & (self.recs[:, cols] >= self.n[:, None])
        first = np.where(ge.any(axis=1), ge.argmax(axis=1) + 1, 10**12)
        return k - first

    def _record(self, j: int, e: int, raw: np.ndarray) -> None:
        """Quiet steps ``j..e-1``: each recorded its recommendation and scaled nothing."""
        if e <= j:
            return
        lo = max(j, e - self.s_len)
        slots = np.arange(lo, e) % self.s_len
        self.recs[:, slots] = raw[:, lo - j :]
        self.rec_ok[:, slots] = True
        ev = np.arange(max(j, e - self.e_len), e) % self.e_len
        self.ev_up[:, ev] = 0
        self.ev_down[:, ev] = 0

    def _past(self, ring: np.ndarray, slot: int, w: int) -> np.ndarray:
        if w == 0:
            return self.zero
        return ring[:, (slot - np.arange(1, w + 1)) % self.e_len].sum(axis=1)

    def step(self, k: int, load: np.ndarray, lo: np.ndarray, per: float) -> np.ndarray:
        """One sync for every row; returns which rows changed their replica count."""
        up, down, hi = self.hpa.scale_up, self.hpa.scale_down, self.hpa.max_replicas
        n, pend, slot = self.n, self.pend, k % self.d_len
        ready = self.ready + pend[:, slot]
        pend[:, slot] = 0
        raw = self.raw(load, n, ready, per)
        # Upstream reconcile (from memory): below minReplicas or above maxReplicas the
        # count jumps straight to the bound; behaviour and stabilization do not apply.
        normal = (n >= lo) & (n <= hi)
        rs = k % self.s_len
        self.recs[:, rs], self.rec_ok[:, rs] = raw, normal
        # [HPA doc] "Stabilization window": scale down only to the highest
        # recommendation in the window, scale up only to the lowest in its window.
        order = (rs - np.arange(self.s_len)) % self.s_len  # 0 = now, 1 = a sync ago
        down_rec, up_rec = raw, raw
        if self.w_down:
            c = order[: self.w_down + 1]
            down_rec = np.where(self.rec_ok[:, c], self.recs[:, c], -1).max(axis=1)
        if self.w_up:
            c = order[: self.w_up + 1]
            up_rec = np.where(self.rec_ok[:, c], self.recs[:, c], np.iinfo(np.int64).max)
            up_rec = up_rec.min(axis=1)
        stab = np.minimum(np.maximum(n, up_rec), down_rec)
        es = k % self.e_len
        self.ev_up[:, es], self.ev_down[:, es] = 0, 0
        final = n
        if (stab > n).any():
            # [HPA doc] "Scaling policies": a period starts from the count then, which
            # upstream reckons from both directions' events (from memory).
            net = np.stack([self._past(self.ev_up, es, w) - self._past(self.ev_down, es, w)
                            for w in self.up_w] or [self.zero])  # fmt: skip
            lim = np.maximum(scale_up_limit(n, net, up), n)
            final = np.where(stab > n, np.minimum(stab, np.minimum(hi, lim)), final)
        if (stab < n).any():
            net = np.stack([self._past(self.ev_down, es, w) - self._past(self.ev_up, es, w)
                            for w in self.down_w] or [self.zero])  # fmt: skip
            lim = np.minimum(scale_down_limit(n, net, down), n)
            final = np.where(stab < n, np.maximum(stab, np.maximum(lo, lim)), final)
        final = np.where(normal, final, np.where(n < lo, lo, hi))
        change = final - n
        if (change > 0).any():
            grow = np.maximum(change, 0)
            now = self.delay == 0
            ready = ready + np.where(now, grow, 0)
            pend[self.rows, (k + self.delay) % self.d_len] += np.where(now, 0, grow)
            self.ev_up[:, es] = grow
        if (change < 0).any():
            # Newest not-ready pods go first: walk the pipeline from its far end.
            left = np.maximum(-change, 0)
            self.ev_down[:, es] = left
            for j in range(self.d_len - 1, 0, -1):
                s = (k + j) % self.d_len
                take = np.minimum(left, pend[:, s])
                pend[:, s] -= take
                left = left - take
            ready = ready - left
        self.n, self.ready = final, ready
        return change != 0
