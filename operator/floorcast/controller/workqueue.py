"""A delayed, de-duplicating work queue of policy keys (the controller-runtime habit).

Why not kopf's per-object timers: a timer per policy asks for a reconcile every
interval whether or not anything can have changed, which at thousands of policies is
most of the operator's work. A floor only changes at an instant the plan already knows
(``status.nextChange``) or when an input changes, so each reconcile says when it wants
to run next and input changes add the key now.

Semantics, as a Kubernetes controller's work queue has them:

* a key is queued at most once; adding it again keeps the earlier due time;
* a key being processed is never handed to a second worker; an add meanwhile is
  remembered and the key comes back after ``done``;
* among keys already due, the smallest ``priority`` goes first (start-up orders the
  resumed policies by their nearest planned change).

The clock is a parameter so the ordering rules are unit-tested without sleeping.
"""

from __future__ import annotations

import heapq
import itertools
import threading
import time
from collections.abc import Callable, Hashable
from dataclasses import dataclass

Key = Hashable


@dataclass
class _Entry:
    due: float
    priority: float
    ready: bool = False  # moved from the timer heap to the ready heap


class WorkQueue:
    """Two heaps: timers by due time, and keys already due by priority. An entry
    superseded by an earlier add stays in its heap and is skipped when it surfaces
    (its ``(due, priority)`` no longer matches ``_queued``)."""

    def __init__(self, clock: Callable[[], float] = time.monotonic) -> None:
        self._clock = clock
        self._cv = threading.Condition()
        self._timers: list[tuple[float, int, Key, float]] = []  # (due, seq, key, prio)
        self._ready: list[tuple[float, float, int, Key]] = []  # (prio, due, seq, key)
        self._queued: dict[Key, _Entry] = {}
        self._busy: set[Key] = set()
        #: Adds that arrived while their key was being processed: (due, priority).
        self._again: dict[Key, tuple[float, float]] = {}
        self._seq = itertools.count()
        self._closed = False

    def __len__(self) -> int:
        with self._cv:
            return len(self._queued)

    def add(self, key: Key, *, delay: float = 0.0, priority: float = 0.0) -> None:
        """Queue ``key`` to be due in ``delay`` seconds (earlier due times win)."""
        due = self._clock() + max(0.0, delay)
        with self._cv:
            if self._closed:
                return
            if key in self._busy:
                old = self._again.get(key)
                self._again[key] = min(old, (due, priority)) if old else (due, priority)
                return
            if self._push(key, due, priority):
                self._cv.notify()

    def _push(self, key: Key, due: float, priority: float) -> bool:
        """The earliest due time and the most urgent priority of all adds win."""
        old = self._queued.get(key)
        if old is not None:
            if old.ready:  # already due: only re-rank
                if priority >= old.priority:
                    return False
                old.priority = priority
                heapq.heappush(self._ready, (priority, old.due, next(self._seq), key))
                return True
            due, priority = min(due, old.due), min(priority, old.priority)
            if (due, priority) == (old.due, old.priority):
                return False
        self._queued[key] = _Entry(due, priority)
        heapq.heappush(self._timers, (due, next(self._seq), key, priority))
        return True

    def due_in(self, key: Key) -> float | None:
        """Seconds until ``key`` is due (negative: overdue), or None if not queued."""
        with self._cv:
            e = self._queued.get(key)
            return None if e is None else e.due - self._clock()

    def forget(self, key: Key) -> None:
        with self._cv:
            self._queued.pop(key, None)
            self._again.pop(key, None)

    def get(self, timeout: float | None = None) -> Key | None:
        """The next due key (marked busy until ``done``), or None on timeout or close."""
        deadline = None if timeout is None else self._clock() + timeout
        with self._cv:
            while not self._closed:
                key, wait = self._pop_due()
                if key is not None:
                    return key
                if deadline is not None:
                    left = deadline - self._clock()
                    if left <= 0:
                        return None
                    wait = left if wait is None else min(wait, left)
                self._cv.wait(wait)
            return None

    def _pop_due(self) -> tuple[Key | None, float | None]:
        """The due key of lowest priority, or (None, seconds until the next is due)."""
        now = self._clock()
        while self._timers and self._timers[0][0] <= now:
            due, seq, key, prio = heapq.heappop(self._timers)
            e = self._queued.get(key)
            if e is None or e.ready or e.due != due or e.priority != prio:
                continue  # superseded or forgotten
            e.ready = True
            heapq.heappush(self._ready, (prio, due, seq, key))
        while self._ready:
            prio, due, _, key = heapq.heappop(self._ready)
            e = self._queued.get(key)
            if e is None or not e.ready or e.priority != prio or e.due != due:
                continue
            del self._queued[key]
            self._busy.add(key)
            return key, None
        while self._timers:
            due, _, key, prio = self._timers[0]
            e = self._queued.get(key)
            if e is not None and not e.ready and e.due == due and e.priority == prio:
                return None, due - now
            heapq.heappop(self._timers)
        return None, None

    def done(self, key: Key) -> None:
        """Processing ended; an add that came meanwhile queues the key again."""
        with self._cv:
            self._busy.discard(key)
            again = self._again.pop(key, None)
            if again is not None and not self._closed:
                self._push(key, *again)
                self._cv.notify()

    def close(self) -> None:
        with self._cv:
            self._closed = True
            self._cv.notify_all()
