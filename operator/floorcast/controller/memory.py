"""Keep glibc from holding on to memory the operator has already freed.

Measured with tests/perf/bench_operator.py (500 policies, glibc's mallinfo2 inside the
running operator): of a 188 MiB main heap only 33 MiB was in use; the rest was free
chunks left behind by the start-up flood (kopf lists and reconciles every policy and
ConfigMap at once). Python objects were ~90 MiB in all (tracemalloc), so RSS (326
MiB) was mostly memory glibc kept but nobody used. ``malloc_trim(0)`` hands free
pages back to the kernel (glibc manual, "Memory Allocation Tunables" / malloc_trim(3):
it releases free memory from every arena, not only the top of the heap); one call in
that process brought RSS from 326 to 181 MiB. ``MALLOC_ARENA_MAX=2`` changed nothing
(324 MiB): the waste is in the main arena, not in per-thread arenas.

So: a fixed mmap threshold (large blocks such as whole list responses are mapped and
unmapped, never parked in the heap; glibc otherwise raises the threshold dynamically
up to 32 MiB, from memory) and a trim every few seconds, which costs a few ms.
Elsewhere than glibc (musl, macOS) all of this is a no-op.

Measured after the change (same benchmark): steady RSS 177-184 MiB, but the start-up
peak (VmHWM) stayed ~320 MiB with a trim every 5 s or every 1 s alike: that peak was
memory in use during the flood, not freed memory kept. It was native memory of
hundreds of TLS connections opened at once; controller/connections.py caps them, and
the peak is now ~175 MiB.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import logging
import threading

log = logging.getLogger("floorcast.operator")
M_TRIM_THRESHOLD, M_MMAP_THRESHOLD = -1, -3  # <malloc.h>, from memory
MMAP_THRESHOLD = 128 * 1024  # glibc's initial default, now fixed (mallopt(3))
TRIM_THRESHOLD = 1 << 20
TRIM_EVERY_SECONDS = 5.0


def _libc() -> ctypes.CDLL | None:
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        libc.malloc_trim  # noqa: B018 (glibc only)
        libc.mallopt  # noqa: B018
        return libc
    except (OSError, AttributeError):
        return None


def trim() -> bool:
    """Return free heap pages to the kernel now; False where not supported."""
    libc = _libc()
    if libc is None:
        return False
    libc.malloc_trim(ctypes.c_size_t(0))
    return True


def start_trimming(every: float = TRIM_EVERY_SECONDS) -> threading.Event | None:
    """Set the thresholds and trim in a daemon thread until the returned event is set."""
    libc = _libc()
    if libc is None:
        log.debug("not glibc: no malloc tuning")
        return None
    libc.mallopt(M_MMAP_THRESHOLD, MMAP_THRESHOLD)
    libc.mallopt(M_TRIM_THRESHOLD, TRIM_THRESHOLD)
    stop = threading.Event()

    def loop() -> None:
        while not stop.wait(every):
            libc.malloc_trim(ctypes.c_size_t(0))

    threading.Thread(target=loop, daemon=True, name="malloc-trim").start()
    return stop
