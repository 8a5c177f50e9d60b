"""How closely ``core/hpa_model.py`` reproduces the real HPA controller.

The same load trace runs through the living cluster (real kube-controller-manager,
metrics-server, kwok Pods that take ``pod_ready_delay`` to become Ready) and through
the model with the same settings (sync period, tolerance, scale-down stabilization,
start-up delay, minReplicas over time); this compares replica-minutes, Ready-pod-
minutes and saturation minutes as model/real ratios.

``python -m e2e.fidelity [--minutes 20]`` runs a compressed day of ramps and peaks
on a fresh living control plane and prints the agreement; the living scenarios
(``e2e/test_living_scenarios.py``) run the same comparison on their shorter day in
CI and fail when it drops below :data:`TARGETS`.
"""

from __future__ import annotations

import argparse
import itertools
import math
import sys
import tempfile
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from floorcast.core import hpa_model

#: Agreement the model must reach (issue targets): replica-minutes within 10 %,
#: saturation within 25 % or 2 minutes, whichever is looser.
REPLICA_TOLERANCE = 0.10
SATURATION_TOLERANCE, SATURATION_SLACK_MIN = 0.25, 2.0


@dataclass(frozen=True)
class Agreement:
    """Model vs real over one window; minutes, and model/real ratios."""

    replica_min: tuple[float, float]  # (model, real)
    ready_min: tuple[float, float]
    saturation_min: tuple[float, float]

    @staticmethod
    def _ratio(pair: tuple[float, float]) -> float:
        m, r = pair
        return m / r if r > 0 else (1.0 if m == 0 else math.inf)

    def ok(self) -> bool:
        m, r = self.replica_min
        sm, sr = self.saturation_min
        replicas_ok = abs(m - r) <= REPLICA_TOLERANCE * r
        sat_ok = abs(sm - sr) <= max(SATURATION_TOLERANCE * sr, SATURATION_SLACK_MIN)
        return replicas_ok and sat_ok

    def line(self, name: str) -> str:
        parts = []
        for label, pair in (("replica-min", self.replica_min), ("ready-min", self.ready_min),
                            ("saturation-min", self.saturation_min)):  # fmt: skip
            parts.append(f"{label} model {pair[0]:.1f} real {pair[1]:.1f} "
                         f"ratio {self._ratio(pair):.2f}")  # fmt: skip
        verdict = "within" if self.ok() else "OUTSIDE"
        return f"{name}: " + "; ".join(parts) + f"  -> {verdict} target"


def model_run(
    load: np.ndarray,
    minimum: np.ndarray,
    *,
    sync_seconds: int,
    per_replica: float,
    capacity: float,
    target: float,
    max_replicas: int,
    scale_down_window: int,
    ready_delay: float,
    metric_resolution: float = 0.0,
) -> tuple[float, float, float]:
    """(replica-min, ready-min, saturation-min) of the model on ``load`` (per sync)."""
    hpa = hpa_model.HpaConfig(
        max_replicas=max_replicas,
        target_utilization=target,
        scale_down=hpa_model.ScalingRules(
            scale_down_window, hpa_model.DEFAULT_SCALE_DOWN.policies
        ),
        sync_seconds=sync_seconds,
        metric_resolution_seconds=metric_resolution,
    )
    delay = math.ceil(ready_delay / sync_seconds - 1e-9)
    tr = hpa_model.simulate(load, minimum, per_replica=per_replica, hpa=hpa,
                            ready_delay_steps=delay)  # fmt: skip
    dt = sync_seconds / 60.0
    sat = float(np.sum(load > tr.ready[0] * capacity + 1e-9) * dt)
    return float(tr.replicas[0].sum() * dt), float(tr.ready[0].sum() * dt), sat


def real_minutes(samples: Sequence, t0: float, t1: float, capacity: float) -> tuple[float, ...]:
    """(replica-min, ready-min, saturation-min) of a load driver's record in [t0, t1)."""
    rep = ready = sat = 0.0
    for a, b in itertools.pairwise(samples):
        if a.t < t0 or a.t >= t1:
            continue
        dt = (min(b.t, t1) - a.t) / 60.0
        rep += a.pods * dt
        ready += a.ready * dt
        if a.load > a.ready * capacity + 1e-9:
            sat += dt
    return rep, ready, sat


def on_grid(t0: float, t1: float, sync: int, fn: Callable[[float], float]) -> np.ndarray:
    return np.array([fn(t0 + k * sync) for k in range(int((t1 - t0) // sync))], dtype=float)


def compressed_day(minutes: float) -> Callable[[float], float]:
    """A day of human-rhythm load squeezed into ``minutes``: night, a morning ramp,
    a lunch peak with a steep front, an afternoon dip, an evening peak, night."""
    from e2e.load import ramp

    s = minutes * 60 / 20.0  # the shape is laid out on 20 units
    return ramp([(0, 1.0), (2 * s, 1.0), (5 * s, 5.0), (7 * s, 5.0), (7.5 * s, 10.0),
                 (9.5 * s, 10.0), (11 * s, 4.0), (13 * s, 4.0), (14 * s, 8.0), (16 * s, 8.0),
                 (18 * s, 1.0), (20 * s, 1.0)])  # fmt: skip


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=20.0)
    args = ap.parse_args(argv)
    from e2e.conftest import LIVING, LIVING_HPA_SYNC
    from e2e.controlplane.runner import ControlPlane
    from e2e.living_env import (
        HPA_MAX,
        HPA_MIN,
        HPA_TARGET,
        POD_CPU,
        SCALE_DOWN_WINDOW,
        create_service,
        living_env,
        ready_pods,
        wait_until,
    )
    from e2e.load import LoadDriver

    trace = compressed_day(args.minutes)
    sync = int(LIVING_HPA_SYNC.rstrip("s"))
    tmp = Path(tempfile.mkdtemp(prefix="floorcast-fidelity-"))
    with ControlPlane(living=LIVING, hpa_sync_period=LIVING_HPA_SYNC) as cp, \
            cp.api_client() as api, living_env(cp, tmp, api) as env:  # fmt: skip
        create_service(env, "twin")
        wait_until(lambda: ready_pods(env, "twin") == HPA_MIN, 120, "2 Ready pods")
        origin = time.time() + 5
        with LoadDriver(api, env.namespace, "app=twin", trace, capacity=POD_CPU,
                        origin=origin) as drv:  # fmt: skip
            while time.time() < origin + args.minutes * 60:
                time.sleep(5)
        t1 = args.minutes * 60
        real = real_minutes(drv.samples, 0, t1, POD_CPU)
        load = on_grid(0, t1, sync, trace)
        mins = np.full((1, load.size), HPA_MIN)
        target = HPA_TARGET / 100
        for res in (0.0, float(LIVING.metric_resolution.rstrip("s"))):
            model = model_run(load, mins, sync_seconds=sync, per_replica=POD_CPU * target,
                              capacity=POD_CPU, target=target, max_replicas=HPA_MAX,
                              scale_down_window=SCALE_DOWN_WINDOW,
                              ready_delay=LIVING.pod_ready_delay,
                              metric_resolution=res)  # fmt: skip
            agr = Agreement(*zip(model, real, strict=True))
            print(agr.line(f"HPA alone, {args.minutes:g} min, metric resolution {res:g} s"))
    return 0


if __name__ == "__main__":
    sys.exit(main())
