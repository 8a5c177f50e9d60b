"""A self-contained HTML back-test report: one file, plots embedded as base64 PNG.

Meant to be mailed or attached to a change request, so it references nothing outside
itself (no scripts, stylesheets or images to fetch). Colours, stylesheet and words come
from ``floorcast.plotstyle``, shared with the plan PNG.
"""

from __future__ import annotations

import base64
import html
import io
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd

from floorcast import plotstyle as ps
from floorcast.replay import Result

COLORS = ps.SCENARIO_COLORS
LABELS = ps.SCENARIO_LABELS


def _png(fig: plt.Figure) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90)
    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _plots(r: Result, target: float) -> str:
    t = pd.date_range(r.start, periods=len(r.demand), freq=r.sync).tz_localize(None)
    # Thin to at most ~4000 points per line: the picture is the same, the file small.
    every = max(1, len(t) // 4000)
    t = t[::every]
    with plt.rc_context(ps.rc()):
        fig = _draw(r, target, t, every)
    return _png(fig)


def _draw(r: Result, target: float, t: pd.DatetimeIndex, every: int) -> plt.Figure:
    fig, axes = plt.subplots(3, 1, figsize=(12, 9), sharex=True)
    ax = axes[0]
    ax.plot(t, r.demand[::every], color=ps.INK, lw=ps.THIN_LW, label=ps.WORDS["demand"])
    ax.set_ylabel("load")
    ax.set_title("Recorded load")
    ax2 = axes[1]
    for key in ("reactive", "static_peak", "floorcast"):
        i = r.row(key)
        ax2.step(t, r.trace.replicas[i, ::every], where="post", color=COLORS[key], lw=1.0,
                 label=LABELS[key])  # fmt: skip
    ax2.step(t, r.minimum[r.row("floorcast"), ::every], where="post", color=ps.FLOOR, lw=0.7,
             ls=":", label=f"floorcast {ps.WORDS['floor']}")  # fmt: skip
    ax2.set_ylabel("replicas")
    ax2.set_title("Replicas per scenario")
    ax3 = axes[2]
    for key in ("reactive", "floorcast"):
        i = r.row(key)
        ready = r.trace.ready[i, ::every].astype(float)
        with np.errstate(divide="ignore", invalid="ignore"):
            util = target * r.demand[::every] / (ready * r.per_replica)
        ax3.plot(t, util * 100, color=COLORS[key], lw=0.7, label=LABELS[key])
    ax3.axhline(target * 100, color=ps.INK, ls="--", lw=ps.THIN_LW, label=ps.WORDS["target"])
    ax3.axhline(100, color=ps.RAISED, ls=":", lw=ps.THIN_LW, label="100 % (under capacity above)")
    ax3.set_ylabel("utilization of ready pods (%)")
    ax3.set_title("Utilization vs target")
    for a in axes:
        a.legend(loc="upper left")
    fig.autofmt_xdate()
    fig.tight_layout()
    return fig


def _frontier(r: Result) -> str:
    from floorcast.cli.report_frontier import draw_frontier

    with plt.rc_context(ps.rc()):
        fig = draw_frontier(r)
    return _png(fig)


def write_report(r: Result, out: Path, *, title: str, target: float) -> None:
    from floorcast.cli.backtest_summary import equal_saturation_line
    from floorcast.cli.report_frontier import ORACLE_WORDS

    rows = []
    names = {**LABELS, "oracle": ORACLE_WORDS}
    for key in ("reactive", "static_peak", "floorcast", "oracle"):
        s = r.scores[r.row(key)]
        rows.append(
            f"<tr><td>{names[key]}</td><td>{s['under_capacity_minutes']:.1f}</td>"
            f"<td>{s['over_target_minutes']:.1f}</td><td>{s['replica_hours']:.1f}</td>"
            f"<td>{s['peak_utilization']:.0%}</td><td>{s['scale_events']}</td></tr>"
        )
    e = r.forecast_error
    err = (
        f"<p>Floors came from {e['forecasts']} rolling forecasts ({', '.join(e['methods'])}), "
        f"each made only from history before its time: MAE {e['mae']:.3g}, MASE "
        f"{e['mase'] if e['mase'] is None else round(e['mase'], 2)}, actual within the upper "
        f"band {e['upper_coverage']:.0%}.</p>"
        if e.get("mae") is not None
        else ""
    )
    sweep = ""
    if r.sweep:
        cells = "".join(
            f"<tr><td>{i + 1}</td><td>{row['leadTime']}</td><td>{row['holdTime']}</td>"
            f"<td>{row['headroom']:g}</td><td>{row['target_utilization']:.0%}</td>"
            f"<td>{row['under_capacity_minutes']:.1f}</td><td>{row['replica_hours']:.1f}</td>"
            f"<td>{_saving(row['saving_at_equal_saturation'])}</td></tr>"
            for i, row in enumerate(r.sweep)
        )
        sweep = (
            "<h2>Trade-off</h2><table><tr><th>point</th><th>leadTime</th><th>holdTime</th>"
            "<th>headroom</th><th>HPA target</th><th>under capacity (min)</th>"
            f"<th>replica-hours</th><th>saving at equal saturation</th></tr>{cells}</table>"
        )
    frontier = (
        "<h2>Against a lower HPA target</h2>"
        f"<p>{html.escape(equal_saturation_line(r))}. Saturation: minutes whose demand is "
        "above what the ready pods carry at 100 % of their CPU. The oracle plans on the load "
        "that really followed: perfect foresight, for reference only.</p>"
        '<img alt="saturation against replica-hours" style="max-width:100%" '
        f'src="data:image/png;base64,{_frontier(r)}">'
    )
    doc = f"""<!doctype html>
<html><head><meta charset="utf-8"><title>floorcast backtest: {html.escape(title)}</title>
<style>{ps.css()}</style></head><body>
<h1>Back-test: {html.escape(title)}</h1>
<p>{r.start:%Y-%m-%d %H:%M} to {r.end:%Y-%m-%d %H:%M} UTC, HPA target {target:.0%},
baseline {r.bounds.baseline}, ceiling {r.bounds.ceiling}, static floor {r.static_floor},
pods serve {r.pod_startup} after creation. Start every policy in DryRun and follow
your change process before Enforce.</p>
<table><tr><th>scenario</th><th>under capacity (min)</th><th>over target (min)</th>
<th>replica-hours</th><th>peak utilization</th><th>scale events</th></tr>{"".join(rows)}</table>
{frontier}{err}{sweep}
<img alt="load, replicas and utilization" style="max-width:100%"
 src="data:image/png;base64,{_plots(r, target)}">
</body></html>
"""
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(doc, encoding="utf-8")


def _saving(x: float | None) -> str:
    return "n/a" if x is None else f"{x:+.0%}"
