"""floorcast's own look for every picture and report: one palette, one vocabulary.

The plan PNG (``cli/plots.py``) and the HTML back-test report (``cli/report.py``)
draw the same things — forecast, forecast band, the floor, the HPA alone — so they
take their colours and words from here and a reader sees the same amber floor and
the same lavender band in both. The palette is ink on warm paper: an indigo
forecast in a lavender band, the floor in amber, the reactive HPA in berry, the
static floor in slate; floor changes are marked with triangles on the floor (up
when it rises, down when it falls) rather than with lines across the whole plot.

No matplotlib import here: the constants are plain strings and ``RC`` a plain dict
for ``matplotlib.pyplot.rc_context``, so this module is cheap for anyone to import
(the HTML report reads ``css()`` without drawing anything).
"""

from __future__ import annotations

from typing import Any

# -- colours (hex, so matplotlib and CSS read the same values) ---------------------
INK = "#2b2d42"  # text, axes, recorded demand
PAPER = "#fbf8f1"  # figure and page background
PANEL = "#fffdf8"  # plot area
GRID = "#e6e0d3"
FORECAST = "#4c3f91"  # the forecast value line
BAND = "#dcd5ef"  # the forecast band (lower..upper), filled
FLOOR = "#d08a1e"  # the replica floor and what it carries
SIZED_ON = "#9c3d63"  # the load the floor is sized on (dashed)
REQUIRED = "#8a94a6"  # required replicas r(t), before the lead/hold window
CEILING = INK
RAISED = "#c0621a"  # floor change upwards
LOWERED = "#2f7f6f"  # floor change downwards
UNCOVERED = "#cfc8b8"  # beyond what the forecast covers for the lead window

#: Back-test scenarios: the floorcast scenario wears the floor's amber.
SCENARIO_COLORS = {"reactive": SIZED_ON, "static_peak": REQUIRED, "floorcast": FLOOR}

# -- words -------------------------------------------------------------------------
WORDS = {
    "forecast": "forecast",
    "band": "forecast band",
    "floor": "replica floor (minReplicas)",
    "carried": "load the floor carries",
    "required": "replicas the forecast needs",
    "ceiling": "ceiling",
    "changes": "floor changes",
    "raised": "floor raised",
    "lowered": "floor lowered",
    "uncovered": "past the forecast's lead coverage",
    "demand": "recorded load",
    "target": "HPA target",
}
SCENARIO_LABELS = {
    "reactive": "HPA alone",
    "static_peak": "static peak floor",
    "floorcast": "HPA + floorcast",
}

#: Line widths, so the floor reads as the main line in every picture.
FLOOR_LW, LINE_LW, THIN_LW = 2.0, 1.3, 0.8
#: Triangle markers for floor changes.
RAISED_MARKER, LOWERED_MARKER, MARKER_SIZE = "^", "v", 6

#: matplotlib rc settings; ``rc()`` adds the colour cycle (never matplotlib's default).
RC: dict[str, Any] = {
    "figure.facecolor": PAPER,
    "savefig.facecolor": PAPER,
    "axes.facecolor": PANEL,
    "axes.edgecolor": GRID,
    "axes.labelcolor": INK,
    "axes.titlecolor": INK,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.titlesize": 11,
    "axes.grid": True,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "grid.color": GRID,
    "grid.linewidth": 0.7,
    "xtick.color": INK,
    "ytick.color": INK,
    "text.color": INK,
    "legend.frameon": False,
    "legend.fontsize": 8,
}


def _cycle() -> Any:
    from cycler import cycler  # matplotlib's own dependency; only when a plot is drawn

    return cycler(color=[FORECAST, FLOOR, SIZED_ON, LOWERED, REQUIRED, RAISED])


def rc() -> dict[str, Any]:
    """The rc settings with the palette as the colour cycle, for ``rc_context``."""
    return {**RC, "axes.prop_cycle": _cycle()}


def css() -> str:
    """The HTML report's stylesheet in the same palette as the PNGs it embeds."""
    return (
        f"body{{font-family:sans-serif;max-width:1200px;margin:2em auto;color:{INK};"
        f"background:{PAPER}}}"
        f"h1,h2{{color:{INK};border-bottom:3px solid {FLOOR};padding-bottom:.2em}}"
        "table{border-collapse:collapse}"
        f"td,th{{border:1px solid {GRID};padding:4px 10px;text-align:right;background:{PANEL}}}"
        f"th{{background:{BAND};color:{INK}}}"
        "td:first-child{text-align:left}"
    )
