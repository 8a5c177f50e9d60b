"""controller/memory.py: free heap pages go back to the kernel (glibc only).

The check is the one that found the problem in the operator: RSS from /proc (proc(5),
"VmRSS") after freeing most of many malloc'd blocks, before and after ``trim()``.
Blocks over 512 bytes bypass CPython's small-object allocator and come from malloc
(CPython docs, "Memory Management", pymalloc section); every 50th is kept so the
freed ones are holes inside the heap that glibc's own top-of-heap trimming cannot
give back (malloc_trim(3)).
"""

from __future__ import annotations

import platform
import threading
import time
from pathlib import Path

import pytest

from floorcast.controller import memory


def rss_kib() -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1])
    raise AssertionError("no VmRSS")


@pytest.mark.skipif(platform.system() != "Linux" or memory._libc() is None, reason="glibc")
def test_trim_returns_freed_heap_pages() -> None:
    blocks = [bytes(1400) + bytes([i % 256]) for i in range(30_000)]  # ~40 MiB
    keep = blocks[::50]
    del blocks
    before = rss_kib()
    assert memory.trim() is True
    after = rss_kib()
    assert before - after > 20 * 1024, (before, after)  # most of the ~40 MiB freed
    assert len(keep) == 600


def test_trimming_thread_stops_when_told() -> None:
    stop = memory.start_trimming(every=0.05)
    if stop is None:
        pytest.skip("not glibc")
    time.sleep(0.2)
    stop.set()
    time.sleep(0.1)
    assert not any(t.name == "malloc-trim" and t.is_alive() for t in threading.enumerate())
