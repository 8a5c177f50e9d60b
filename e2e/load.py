"""A load driver for the living cluster: replays a load trace as the CPU its Pods use.

Demand is shared by the Pods that serve — the Ready ones — so each Ready Pod of the
workload reports ``load(t) / ready`` cores through the annotation kwok's resource-usage
rule reads (``living.CPU_USAGE_ANNOTATION``); Pods still starting report an idle
trickle. That closes the loop the HPA lives in: more Ready Pods → lower utilization →
the HPA settles. Every tick is recorded, so a test can say how long demand exceeded
what the Ready Pods carry at 100 % of their CPU request (saturation).
"""

from __future__ import annotations

import itertools
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field

from kubernetes import client as k8s

from e2e.controlplane.living import CPU_USAGE_ANNOTATION

Trace = Callable[[float], float]  # seconds since start -> load in cores


@dataclass(frozen=True)
class Sample:
    """One tick: what was demanded and what served it."""

    t: float  # seconds since the driver started
    load: float  # cores demanded
    ready: int  # Ready Pods sharing it
    pods: int  # all Pods of the workload that are not being deleted


@dataclass
class LoadDriver:
    """Drive the Pods matching ``selector`` in ``namespace`` with ``trace``.

    ``capacity`` is what one Ready Pod carries at 100 % (its CPU request, in cores).
    ``origin`` is the wall-clock instant (epoch seconds) the trace's t = 0 is pinned
    to, so a forecast written for the same instants lines up; default: start.
    Use as a context manager; :attr:`samples` holds the record.
    """

    api: k8s.ApiClient
    namespace: str
    selector: str
    trace: Trace
    capacity: float = 1.0
    period: float = 2.0
    origin: float | None = None
    samples: list[Sample] = field(default_factory=list)
    errors: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._written: dict[str, str] = {}

    def __enter__(self) -> LoadDriver:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def start(self) -> None:
        if self.origin is None:
            self.origin = time.time()
        self._thread = threading.Thread(target=self._run, name="load-driver", daemon=True)
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=30)

    def elapsed(self) -> float:
        """Seconds since the trace's origin (negative before it)."""
        assert self.origin is not None
        return time.time() - self.origin

    def _run(self) -> None:
        core = k8s.CoreV1Api(self.api)
        while not self._stop.is_set():
            began = time.monotonic()
            try:
                self.tick(core)
            except Exception as exc:  # keep driving; a test inspects .errors
                self.errors.append(repr(exc))
            self._stop.wait(max(0.0, self.period - (time.monotonic() - began)))

    def tick(self, core: k8s.CoreV1Api) -> Sample:
        t = self.elapsed()
        load = max(0.0, float(self.trace(t)))
        pods = core.list_namespaced_pod(self.namespace, label_selector=self.selector).items
        live = [p for p in pods if p.metadata.deletion_timestamp is None]
        ready = [p for p in live if is_ready(p)]
        share = load / len(ready) if ready else 0.0
        want = f"{max(1, round(share * 1000))}m"
        for p in ready:
            if self._written.get(p.metadata.name) != want:
                core.patch_namespaced_pod(
                    p.metadata.name,
                    self.namespace,
                    {"metadata": {"annotations": {CPU_USAGE_ANNOTATION: want}}},
                )
                self._written[p.metadata.name] = want
        sample = Sample(t=t, load=load, ready=len(ready), pods=len(live))
        self.samples.append(sample)
        return sample

    def saturated_seconds(self, since: float = 0.0, until: float | None = None) -> float:
        """Time in [since, until) where demand exceeded the Ready Pods at 100 %."""
        total = 0.0
        pts = self.samples
        for a, b in itertools.pairwise(pts):
            if a.t < since or (until is not None and a.t >= until):
                continue
            if a.load > a.ready * self.capacity + 1e-9:
                total += b.t - a.t
        return total


def is_ready(pod: k8s.V1Pod) -> bool:
    for c in (pod.status and pod.status.conditions) or []:
        if c.type == "Ready":
            return c.status == "True"
    return False


def ramp(points: list[tuple[float, float]]) -> Trace:
    """A piecewise-linear trace through ``(seconds, cores)`` points, flat outside."""
    xs = [p[0] for p in points]
    ys = [p[1] for p in points]

    def load(t: float) -> float:
        if t <= xs[0]:
            return ys[0]
        for (x0, y0), (x1, y1) in itertools.pairwise(points):
            if t <= x1:
                return y0 + (y1 - y0) * (t - x0) / (x1 - x0) if x1 > x0 else y1
        return ys[-1]

    return load
