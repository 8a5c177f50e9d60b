"""PNG pictures of a plan: the forecast, what the floor can carry, and when it moves.

Kept out of the planner so matplotlib is imported only when someone asks for a plot.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # files only; never needs a display

import matplotlib.pyplot as plt
import numpy as np

from floorcast.plans import FloorPlan, planning_load, policy_event_factors


def plot_plan(result: FloorPlan, out: Path, *, title: str) -> None:
    """Load forecast with band on top, floor replicas below, change points on both."""
    fc = result.forecast
    times = fc.times.tz_convert("UTC").tz_localize(None)
    floor = result.schedule.floor[0]
    fig, (ax, ax2) = plt.subplots(
        2, 1, figsize=(11, 6.5), sharex=True, gridspec_kw={"height_ratios": [3, 2]}
    )
    unit = fc.unit or "load"
    if fc.lower is not None and fc.upper is not None:
        ax.fill_between(
            times, fc.lower, fc.upper, color="tab:blue", alpha=0.18, label="forecast band"
        )
    ax.plot(times, fc.values, color="tab:blue", lw=1.4, label="forecast")
    spec = result.spec
    carried = floor * result.per_replica
    ax.step(
        times,
        carried,
        where="post",
        color="tab:orange",
        lw=1.6,
        label="floor × per-replica capacity",
    )
    # What the floor is sized on: band or value, plus headroom, times event factors.
    need = planning_load(spec, fc) * (1 + spec.headroom) * policy_event_factors(spec, fc.times)
    band = "upper band" if spec.use_upper_bound and fc.upper is not None else "forecast"
    ax.plot(
        times,
        need,
        color="tab:red",
        lw=0.8,
        ls="--",
        label=f"sized on: {band} +{spec.headroom:.0%} headroom × events",
    )
    ax.set_ylabel(unit)
    ax.set_title(title)
    ax.legend(loc="upper left", fontsize=8)
    ax.grid(alpha=0.3)
    ax2.step(times, floor, where="post", color="tab:orange", lw=1.6, label="floor (minReplicas)")
    ax2.step(
        times,
        result.schedule.required[0],
        where="post",
        color="grey",
        lw=0.8,
        label="required r(t)",
    )
    top = int(max(np.max(floor), np.max(result.schedule.required[0])))
    if result.bounds.ceiling <= 2 * top:  # a far-away ceiling would flatten the plot
        ax2.axhline(result.bounds.ceiling, color="black", lw=0.8, ls=":", label="ceiling")
        top = max(top, result.bounds.ceiling)
    for c in result.changes:
        t = c.at.tz_convert("UTC").tz_localize(None)
        for a in (ax, ax2):
            a.axvline(t, color="tab:green" if c.new < c.old else "tab:red", lw=0.6, alpha=0.6)
    covered_end = times[min(int(result.schedule.covered[0]), len(times)) - 1]
    ax2.axvspan(covered_end, times[-1], color="grey", alpha=0.15, label="beyond lead coverage")
    ax2.set_ylabel("replicas")
    ax2.set_ylim(0, top + 1)
    ax2.legend(loc="upper left", fontsize=8)
    ax2.grid(alpha=0.3)
    ax2.set_xlabel("time (UTC)")
    fig.autofmt_xdate()
    fig.tight_layout()
    out.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(out, dpi=110)
    plt.close(fig)
