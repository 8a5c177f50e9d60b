"""The operator's work queue: the rules a Kubernetes controller's queue keeps (one entry
per key, no key on two workers, an add during processing comes back after ``done``),
plus due times and the start-up priority. A fake clock: nothing sleeps."""

from __future__ import annotations

import threading

from floorcast.controller.workqueue import WorkQueue


class Clock:
    def __init__(self) -> None:
        self.t = 1000.0

    def __call__(self) -> float:
        return self.t


def test_a_key_is_queued_once_and_the_earlier_due_time_wins() -> None:
    c = Clock()
    q = WorkQueue(clock=c)
    q.add("a", delay=60)
    q.add("a", delay=10)
    q.add("a", delay=30)
    assert len(q) == 1 and q.due_in("a") == 10
    assert q.get(timeout=0) is None  # not due yet
    c.t += 10
    assert q.get(timeout=0) == "a"
    assert q.get(timeout=0) is None and len(q) == 0


def test_among_due_keys_the_lowest_priority_goes_first() -> None:
    c = Clock()
    q = WorkQueue(clock=c)
    q.add("far", priority=900)
    q.add("near", priority=5)
    q.add("unknown", priority=0)
    q.add("later", delay=1, priority=-1)  # not due: its priority does not count yet
    assert [q.get(timeout=0) for _ in range(3)] == ["unknown", "near", "far"]
    c.t += 1
    assert q.get(timeout=0) == "later"


def test_a_busy_key_is_not_handed_out_again_but_comes_back_after_done() -> None:
    c = Clock()
    q = WorkQueue(clock=c)
    q.add("a")
    assert q.get(timeout=0) == "a"
    q.add("a")  # an input changed while "a" was being reconciled
    assert q.get(timeout=0) is None and len(q) == 0
    q.done("a")
    assert q.get(timeout=0) == "a"
    q.done("a")
    assert q.get(timeout=0) is None


def test_a_delayed_add_during_processing_keeps_its_delay() -> None:
    c = Clock()
    q = WorkQueue(clock=c)
    q.add("a")
    q.get(timeout=0)
    q.add("a", delay=30)  # the reconcile's own "next wake"
    q.done("a")
    assert q.due_in("a") == 30


def test_forget_drops_a_queued_key() -> None:
    q = WorkQueue(clock=Clock())
    q.add("a")
    q.forget("a")
    assert q.get(timeout=0) is None and len(q) == 0


def test_raising_priority_of_a_due_key_reorders_it() -> None:
    q = WorkQueue(clock=Clock())
    q.add("a", priority=10)
    q.add("b", priority=5)
    q.add("a", priority=1)
    assert q.get(timeout=0) == "a"


def test_get_blocks_until_an_add_and_close_releases_waiters() -> None:
    q = WorkQueue()
    got: list[object] = []
    t = threading.Thread(target=lambda: got.append(q.get(timeout=5)))
    t.start()
    q.add("x")
    t.join(5)
    assert got == ["x"]
    t = threading.Thread(target=lambda: got.append(q.get()))
    t.start()
    q.close()
    t.join(5)
    assert not t.is_alive() and got[-1] is None


def test_many_keys_each_once() -> None:
    c = Clock()
    q = WorkQueue(clock=c)
    for i in range(1000):
        q.add(i % 100, delay=i % 7, priority=-i)
    c.t += 10
    seen = []
    while (k := q.get(timeout=0)) is not None:
        seen.append(k)
    assert sorted(seen) == list(range(100))
