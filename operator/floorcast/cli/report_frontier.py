"""The back-test's frontier plot: saturation minutes against replica-hours.

The question it answers is the platform engineer's first one — why not just lower
the HPA's target? — so the HPA alone is drawn as a line through its ladder of
targets (each point labelled), floorcast as a point per configuration replayed, and
the perfect-foresight oracle for reference. A point below and left of the HPA's line
is cheaper at equal safety. Colours and words come from ``floorcast.plotstyle``.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt

from floorcast import plotstyle as ps
from floorcast.replay import Result

ORACLE_WORDS = "oracle: perfect foresight (reference only)"


def draw_frontier(r: Result) -> plt.Figure:
    """One axes: the ladder line, the equal-saturation point, floorcast and oracle."""
    fig, ax = plt.subplots(figsize=(9, 5.5))
    rh = [x["replica_hours"] for x in r.ladder]
    sat = [x["under_capacity_minutes"] for x in r.ladder]
    ax.plot(rh, sat, color=ps.SCENARIO_COLORS["reactive"], lw=ps.LINE_LW, marker="o",
            ms=4, label=f"{ps.SCENARIO_LABELS['reactive']} at lower targets")  # fmt: skip
    for x in r.ladder:
        ax.annotate(f"{x['target_utilization']:.0%}", (x["replica_hours"],
                    x["under_capacity_minutes"]), textcoords="offset points", xytext=(4, 4),
                    fontsize=7, color=ps.SCENARIO_COLORS["reactive"])  # fmt: skip
    tuned = r.tuned["floorcast"]["hpa"]
    ax.plot([tuned["replica_hours"]], [tuned["under_capacity_minutes"]], marker="x", ms=9,
            ls="none", color=ps.INK,
            label=f"HPA alone as safe as floorcast ({tuned['found']})")  # fmt: skip
    if r.sweep:
        ax.plot([x["replica_hours"] for x in r.sweep],
                [x["under_capacity_minutes"] for x in r.sweep], ls="none", marker="s", ms=5,
                mfc="none", color=ps.FLOOR, label="floorcast, sweep points")  # fmt: skip
        for i, x in enumerate(r.sweep):
            ax.annotate(str(i + 1), (x["replica_hours"], x["under_capacity_minutes"]),
                        textcoords="offset points", xytext=(4, -9), fontsize=7,
                        color=ps.FLOOR)  # fmt: skip
    fc = r.scores[r.row("floorcast")]
    ax.plot([fc["replica_hours"]], [fc["under_capacity_minutes"]], ls="none", marker="D",
            ms=8, color=ps.FLOOR, label=f"{ps.SCENARIO_LABELS['floorcast']} (policy)")  # fmt: skip
    orc = r.scores[r.row("oracle")]
    ax.plot([orc["replica_hours"]], [orc["under_capacity_minutes"]], ls="none", marker="*",
            ms=11, color=ps.LOWERED, label=ORACLE_WORDS)  # fmt: skip
    ax.set_xlabel("replica-hours (every pod, ready or starting)")
    ax.set_ylabel("saturation (min with demand above ready pods at 100 %)")
    ax.set_title("Safety against cost: floorcast vs lowering the HPA's target")
    # Saturation spans orders of magnitude along the ladder: linear near 0, log above.
    ax.set_yscale("symlog", linthresh=1.0)
    ax.set_ylim(bottom=-0.1)
    ax.legend(loc="upper right")
    fig.tight_layout()
    return fig
