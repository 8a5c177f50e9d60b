"""PNG pictures of a plan: the forecast, what the floor can carry, and when it moves.

Kept out of the planner so matplotlib is imported only when someone asks for a plot.
Colours and words come from ``floorcast.plotstyle``, shared with the HTML report.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # files only; never needs a display

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from floorcast import plotstyle as ps
from floorcast.plans import FloorPlan, planning_load, policy_event_factors


def _naive(t: pd.DatetimeIndex | pd.Timestamp) -> pd.DatetimeIndex | pd.Timestamp:
    return t.tz_convert("UTC").tz_localize(None)


def draw_plan(result: FloorPlan, *, title: str) -> Figure:
    """The plan as a figure: load panel on top, replica panel below.

    Floor changes are triangles on the floor line itself (up for a rise, down for a
    fall), so the picture stays readable on a busy day with many small steps.
    """
    fc = result.forecast
    times = _naive(fc.times)
    # The floor is planned on a finer grid than the forecast (plans.refined_load).
    ptimes = _naive(result.schedule.times)
    floor = result.schedule.floor[0]
    required = result.schedule.required[0]
    spec = result.spec
    carried = floor * result.per_replica
    # What the floor is sized on: band or value, plus headroom, times event factors.
    need = planning_load(spec, fc) * (1 + spec.headroom) * policy_event_factors(spec, fc.times)
    sized = "upper band" if spec.use_upper_bound and fc.upper is not None else "forecast"
    with plt.rc_context(ps.rc()):
        fig, (ax, ax2) = plt.subplots(
            2, 1, figsize=(11, 6.5), sharex=True, gridspec_kw={"height_ratios": [3, 2]}
        )
        ax.fill_between(ptimes, 0, carried, step="post", color=ps.FLOOR, alpha=0.12, lw=0)
        ax.step(ptimes, carried, where="post", color=ps.FLOOR, lw=ps.FLOOR_LW,
                label=ps.WORDS["carried"])  # fmt: skip
        if fc.lower is not None and fc.upper is not None:
            ax.fill_between(times, fc.lower, fc.upper, color=ps.BAND, lw=0,
                            label=ps.WORDS["band"])  # fmt: skip
        ax.plot(times, fc.values, color=ps.FORECAST, lw=ps.LINE_LW, label=ps.WORDS["forecast"])
        ax.plot(times, need, color=ps.SIZED_ON, lw=ps.THIN_LW, ls=(0, (4, 2)),
                label=f"sized on: {sized} +{spec.headroom:.0%} headroom × events")  # fmt: skip
        ax.set_ylabel(fc.unit or "load")
        ax.set_ylim(bottom=0)
        ax.set_title(title)

        ax2.step(ptimes, required, where="post", color=ps.REQUIRED, lw=ps.THIN_LW,
                 label=ps.WORDS["required"])  # fmt: skip
        ax2.step(ptimes, floor, where="post", color=ps.FLOOR, lw=ps.FLOOR_LW,
                 label=ps.WORDS["floor"])  # fmt: skip
        top = int(max(np.max(floor), np.max(required)))
        if result.bounds.ceiling <= 2 * top:  # a far-away ceiling would flatten the plot
            ax2.axhline(result.bounds.ceiling, color=ps.CEILING, lw=ps.THIN_LW, ls=":",
                        label=ps.WORDS["ceiling"])  # fmt: skip
            top = max(top, result.bounds.ceiling)
        covered_end = ptimes[min(int(result.schedule.covered[0]), len(ptimes)) - 1]
        if covered_end < times[-1]:
            hatch = {"facecolor": "none", "edgecolor": ps.UNCOVERED, "hatch": "///", "lw": 0}
            ax.axvspan(covered_end, times[-1], **hatch)
            ax2.axvspan(covered_end, times[-1], label=ps.WORDS["uncovered"], **hatch)
        _mark_changes(result, ax, ax2)
        ax2.set_ylabel("replicas")
        ax2.set_ylim(0, top + 1)
        ax2.set_xlabel("time (UTC)")
        ax.legend(loc="upper left")
        ax2.legend(loc="upper left")
        fig.autofmt_xdate()
        fig.tight_layout()
    return fig


def _mark_changes(result: FloorPlan, ax: plt.Axes, ax2: plt.Axes) -> None:
    """Triangles at each floor change: on the carried load above, on the floor below."""
    for rising, colour, marker, word in (
        (True, ps.RAISED, ps.RAISED_MARKER, "raised"),
        (False, ps.LOWERED, ps.LOWERED_MARKER, "lowered"),
    ):
        picked = [c for c in result.changes if (c.new > c.old) == rising]
        if not picked:
            continue
        at = [_naive(c.at) for c in picked]
        new = np.array([c.new for c in picked], dtype=float)
        style = {"color": colour, "marker": marker, "ms": ps.MARKER_SIZE, "ls": "none"}
        ax.plot(at, new * result.per_replica, **style)
        ax2.plot(at, new, label=f"{ps.WORDS['changes']}: {word} ({len(picked)})", **style)


def plot_plan(result: FloorPlan, out: Path, *, title: str) -> None:
    """Write the plan's picture as a PNG."""
    fig = draw_plan(result, title=title)
    out.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(out, dpi=110)
    plt.close(fig)
