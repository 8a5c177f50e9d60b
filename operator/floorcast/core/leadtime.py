"""``leadTime: auto``: the lead time from the target's own pod start-ups.

A floor raised ``leadTime`` ahead of a need is worth it only if the new Pods are Ready
by then, so the lead should be the time a Pod of this workload takes from creation to
Ready (scheduling, image pull, container start, readiness probes), not a guess. The
operator measures it on the Pods of the target's current revision (their
``metadata.creationTimestamp`` and the ``Ready`` condition's ``lastTransitionTime``,
both whole seconds in the API) and plans with

    lead = clamp(p90 of the start-ups + margin, min, max)

A high percentile rather than the mean because a floor that is late for one Pod in ten
is late for the peak it was raised for; p90 over a few dozen Pods is what the samples
can support (common practice, no source). The percentile is the nearest-rank one
(Hyndman & Fan 1996, "Sample quantiles in statistical packages", definition 1; numpy's
``method="inverted_cdf"``): an observed start-up, never an interpolation between two.

Pure: the adapter lists the Pods and passes plain numbers; time is a parameter.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta

import numpy as np

#: The percentile of the start-ups the lead covers.
PERCENTILE = 0.9
#: Fewer measured Pods than this and the policy's fallback lead applies: one or two
#: start-ups say little about the tail (common practice, no source).
MIN_SAMPLES = 3
#: Only the newest Pods count: start-up drifts with image size and node pools.
MAX_SAMPLES = 50


@dataclass(frozen=True)
class Measurement:
    """What the operator saw: ``startup`` is the percentile in seconds (None without
    enough samples), ``samples`` how many Pods were measured, ``lead`` the lead to plan
    with and ``measured`` whether it came from the Pods (else the fallback)."""

    lead: timedelta
    samples: int
    startup: float | None
    measured: bool


def startups(created: np.ndarray, ready: np.ndarray) -> np.ndarray:
    """Seconds from creation to Ready of each Pod that became Ready, newest first,
    at most ``MAX_SAMPLES``. NaN in ``ready`` is a Pod not Ready yet (left out: it has
    no start-up to measure). A Ready time before creation is a clock glitch, left out."""
    created = np.asarray(created, dtype=float)
    ready = np.asarray(ready, dtype=float)
    ok = np.isfinite(created) & np.isfinite(ready) & (ready >= created)
    order = np.argsort(-created[ok], kind="stable")
    return (ready[ok] - created[ok])[order][:MAX_SAMPLES]


def percentile(values: np.ndarray, q: float = PERCENTILE) -> float:
    """The nearest-rank percentile: the smallest value with at least ``q`` of the
    values at or below it (rank ceil(q·n))."""
    return float(np.quantile(np.asarray(values, dtype=float), q, method="inverted_cdf"))


def measure(samples: np.ndarray, *, margin: timedelta, low: timedelta, high: timedelta,
            fallback: timedelta) -> Measurement:  # fmt: skip
    """The lead to plan with from the start-ups in seconds (``startups``' output)."""
    n = len(samples)
    if n < MIN_SAMPLES:
        return Measurement(lead=fallback, samples=n, startup=None, measured=False)
    p = percentile(samples)
    lead = timedelta(seconds=p) + margin
    return Measurement(lead=min(max(lead, low), high), samples=n, startup=p, measured=True)
