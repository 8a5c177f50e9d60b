"""The worker threads: take a due policy from the queue, reconcile it, queue its next
wake-up (controller/schedule.py). A failed reconcile comes back with exponential
back-off (1 s doubling, at most the resync period), the way kopf retried a
``TemporaryError`` and a controller's rate-limited queue retries an error.

Several workers run reconciles in parallel (API round trips overlap); the queue never
hands one policy to two of them.
"""

from __future__ import annotations

import logging
import threading
from dataclasses import dataclass, field

from floorcast.controller import metrics
from floorcast.controller.reconcile import Runtime, reconcile

log = logging.getLogger("floorcast.operator")
MAX_BACKOFF_EXPONENT = 10


@dataclass
class Workers:
    rt: Runtime
    count: int = 4
    _threads: list[threading.Thread] = field(default_factory=list)
    _failures: dict[tuple[str, str], int] = field(default_factory=dict)

    def start(self) -> None:
        for i in range(self.count):
            t = threading.Thread(target=self._loop, name=f"reconcile-{i}", daemon=True)
            t.start()
            self._threads.append(t)

    def stop(self, timeout: float = 10.0) -> None:
        self.rt.queue.close()
        for t in self._threads:
            t.join(timeout)

    def _loop(self) -> None:
        q = self.rt.queue
        while (key := q.get()) is not None:
            try:
                self.process(key)
            except Exception as e:  # never let one policy stop a worker
                log.error("%s/%s: worker error: %r", key[0], key[1], e)
            finally:
                q.done(key)
                metrics.QUEUE_DEPTH.set(len(q))

    def process(self, key: tuple[str, str]) -> None:
        """One reconcile of ``key`` and its next wake-up."""
        rt = self.rt
        body, deleted = rt.caches.body(key)
        if body is None:
            return  # never seen, or already settled
        deleting = deleted or bool((body.get("metadata") or {}).get("deletionTimestamp"))
        try:
            reconcile(rt, body, deleting=deleting, configmaps=rt.caches.configmap,
                          targets=rt.caches.targets, gone=deleted)  # fmt: skip
        except Exception as e:
            n = self._failures.get(key, 0) + 1
            self._failures[key] = n
            delay = min(rt.periods.resync, 2.0 ** min(n - 1, MAX_BACKOFF_EXPONENT))
            log.warning("%s/%s: reconcile failed (%d in a row): %s; retrying in %gs",
                        key[0], key[1], n, e, delay)  # fmt: skip
            rt.queue.add(key, delay=delay)
            return
        metrics.RECONCILES.inc()
        self._failures.pop(key, None)
        if deleting:
            if deleted:
                rt.caches.settle_deleted(key)
            return  # the finalizer is released; the DELETED event ends it
        wake = rt.wake_in.pop(key, None)
        if wake is not None:
            rt.queue.add(key, delay=wake)
