"""Time-bucketed sums over a sliding window, with memory bounded by the bucket count.

The accuracy guard (``core.guard``) and the floor's cost (``core.floor_cost``) both
need "the sum of the last window" of quantities observed at irregular instants. An
exact sliding window would keep every observation; an exponentially decayed sum
keeps one number but is not "the last window" (yesterday's peak would still weigh
e^-1). A ring of B buckets of width ``window / B`` keeps B sums per quantity and
forgets a whole bucket at once: the window read at ``t`` covers the bucket holding
``t`` and the B − 1 before it, so between (B − 1)/B and all of the window. Each
bucket also remembers which interval it holds (its epoch), so a bucket left over from
an earlier lap of the ring is never counted — a pause longer than the window forgets
everything, as it should.

Pure numpy, vectorized over W workloads and K quantities; time is a parameter
(seconds since the epoch), never a clock read.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Ring:
    """Per workload: which interval each bucket holds and its K sums."""

    epoch: np.ndarray  # (W, B) int64, the bucket's index floor(t / width); −1: empty
    sums: np.ndarray  # (W, B, K) float64
    width: float  # seconds per bucket

    @staticmethod
    def empty(n: int, buckets: int, quantities: int, width: float) -> Ring:
        if buckets < 1 or quantities < 1 or not width > 0:
            raise ValueError("a ring needs at least one bucket, one quantity and a width > 0")
        return Ring(np.full((n, buckets), -1, dtype=np.int64),
                    np.zeros((n, buckets, quantities)), float(width))  # fmt: skip

    @property
    def buckets(self) -> int:
        return int(self.epoch.shape[1])


def add(ring: Ring, values: np.ndarray, at: np.ndarray | float) -> Ring:
    """Add ``values`` (W, K) to the bucket holding ``at`` (seconds, scalar or (W,)).

    A bucket that held an older interval is emptied first. NaN rows add nothing."""
    vals = np.asarray(values, dtype=np.float64)
    n = ring.epoch.shape[0]
    idx = np.broadcast_to(np.floor(np.asarray(at, dtype=np.float64) / ring.width), (n,))
    idx = idx.astype(np.int64)
    slot = idx % ring.buckets
    rows = np.arange(n)
    epoch = ring.epoch.copy()
    sums = ring.sums.copy()
    stale = epoch[rows, slot] != idx
    sums[rows[stale], slot[stale], :] = 0.0
    epoch[rows, slot] = idx
    ok = np.all(np.isfinite(vals), axis=1)
    sums[rows, slot, :] += np.where(ok[:, None], vals, 0.0)
    return Ring(epoch, sums, ring.width)


def total(ring: Ring, at: np.ndarray | float) -> np.ndarray:
    """(W, K) the sums of the buckets inside the window that ends in the bucket of
    ``at``: epochs in (idx − B, idx]. Buckets from the future (a clock stepped back)
    are not counted either."""
    n = ring.epoch.shape[0]
    idx = np.broadcast_to(np.floor(np.asarray(at, dtype=np.float64) / ring.width), (n,))
    idx = idx.astype(np.int64)[:, None]
    live = (ring.epoch > idx - ring.buckets) & (ring.epoch <= idx)
    return np.einsum("wb,wbk->wk", live.astype(np.float64), ring.sums)
